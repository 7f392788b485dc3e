"""The headless core: presets, the sampling chain, the model engine, metrics
and storage. Nothing here imports Qt."""
