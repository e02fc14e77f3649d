"""armlock plan: before the test, how big a holdout, for how long and at what cost (pure statistics + report)."""
