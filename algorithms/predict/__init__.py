"""Prediction: global and local kriging, block kriging, cross-validation, exceedance, neighbourhood check."""
