"""Audit and provenance routes."""
