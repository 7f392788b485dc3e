"""The desktop window: presents what the core computes."""
