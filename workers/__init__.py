"""Celery process side of foldwise (thin: the app, tasks that take ids, the schedule tick)."""
