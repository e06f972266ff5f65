"""Analysis: operating point, conditions, spread, verdicts and hints."""
