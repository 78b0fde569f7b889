"""Draws and sampler statistics as files: Parquet and .npz, long or wide, with strong ETags."""
