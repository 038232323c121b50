"""The analysis as a whole: settings and sections, recipes, result tables."""
