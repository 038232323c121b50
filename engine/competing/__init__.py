"""Competing risks: cumulative incidence, Gray's test, the Fine–Gray model."""
