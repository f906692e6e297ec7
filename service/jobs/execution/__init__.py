"""Running a job: claim, fit and record a unit (execute), fan in (advance), take finished work
from the store (reuse), rebuild plans and scores in any process, assemble result v1, and the
reconciler that heals lost messages and dead workers."""
