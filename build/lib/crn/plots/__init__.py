"""Figures, one module per topic; matplotlib is imported inside the functions."""
