"""Results: the tidy tables every output shows, and the model store (one layout, read and written here)."""
