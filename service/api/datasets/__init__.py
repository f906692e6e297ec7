"""Datasets: register a source, upload a file, get and list by content hash."""
