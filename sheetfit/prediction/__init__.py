"""Predict: stored models plus new rows → predictions with confidence and prediction intervals."""
