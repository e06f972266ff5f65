"""The bias tree as numpy arrays, built from a checked plan."""
