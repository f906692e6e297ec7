"""The REST API v1 of foldwise (FastAPI), grouped by domain."""
