"""The Celery side of foldwise: the app, the tasks (ids in, application services called), the tick.

Thin on purpose: everything a task does lives in `service`, which never imports this package.
"""
