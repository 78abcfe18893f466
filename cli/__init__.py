"""strativ.cli: the strativ command line (being built)."""
