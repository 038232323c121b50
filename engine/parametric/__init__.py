"""Parametric survival models and accelerated failure time fits."""
