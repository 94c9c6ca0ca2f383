"""Export: what the user keeps (YAML block, plots), written atomically."""
