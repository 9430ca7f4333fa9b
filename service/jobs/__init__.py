"""Background jobs: rows in the database (:mod:`.queue`), claimed and run by worker
threads (:mod:`.runner`); their work (:mod:`.work`) runs in those threads or on the Dask
cluster (:mod:`.cluster`); how a failed job ends (:mod:`.problems`)."""

from .queue import KINDS, TERMINAL, cancel_job, get_job, submit_job
from .runner import PROGRESS_INTERVAL_S, JobRunner

__all__ = ["KINDS", "PROGRESS_INTERVAL_S", "TERMINAL", "JobRunner", "cancel_job", "get_job",
           "submit_job"]
