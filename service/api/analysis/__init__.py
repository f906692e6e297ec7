"""Routes for analysts: queries across jobs, exports, comparisons, history."""
