"""Reading jobs back: visibility, get, list, fold-score pages and provenance."""
