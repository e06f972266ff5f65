"""Input: the plan model, the file loader and every structural check of a plan."""
