"""Learning curves: nested selection at several training-set sizes (prepare, then settle)."""
