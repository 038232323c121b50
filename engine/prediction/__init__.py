"""How well a model predicts: censoring weights, performance, optimism."""
