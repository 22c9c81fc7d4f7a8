"""One module per commit strategy; each gives ``evaluate_regime(case, strategy, ctx)``."""
