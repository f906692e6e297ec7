"""Liveness, readiness and Prometheus metrics."""
