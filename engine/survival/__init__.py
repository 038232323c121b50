"""Curves, numbers at risk, RMST, group comparisons, landmark, sample size."""
