"""What analysts ask of the store: queries across jobs, comparisons, exports, history."""
