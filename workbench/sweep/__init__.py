"""The contest: the plan of trials, running them, the store, statistics and results."""
