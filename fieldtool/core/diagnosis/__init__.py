"""Which part failed: the fault catalog, the fault dictionary, priors and the ranking."""
