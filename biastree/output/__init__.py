"""Output: exporters, one module per format (leaves of the pipeline)."""
