"""Statistics layer: pure functions of numpy arrays and LogMoments (scipy allowed, no pandas/xarray)."""
