"""Model: least squares for every group at once (the batched engine) and the inference that follows from it."""
