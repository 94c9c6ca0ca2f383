"""Jobs: one module per thing a user comes to do, each a short pipeline."""
