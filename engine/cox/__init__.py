"""The Cox model: design, likelihood, fit and tests, diagnostics, C, splines, subgroups."""
