"""Handing work units to whatever runs them: Celery workers, or the local pool of the embedded
server. Only ids cross this boundary; the store holds everything else."""

# The Celery task names, shared by the publisher here and the task definitions in `workers`
# (service never imports workers: it sends by name).
TASK_RUN_UNIT = "foldwise.run_unit"  # one unit id (still served: messages already queued)
# a batch of unit ids of one job, claimed and recorded together (service/cv/unit_batches.py)
TASK_RUN_UNITS = "foldwise.run_units"
TASK_RUN_AUDIT = "foldwise.run_audit"
UNIT_QUEUE = "foldwise-units"
