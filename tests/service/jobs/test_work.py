"""What a job's work sees and how its errors become problem documents."""

from __future__ import annotations

import pickle

import pytest
from distributed.scheduler import KilledWorker
from sqlalchemy.orm.exc import StaleDataError

from priors.errors import ConstantSeriesError, DateRangeError, WorkCancelled
from service.auth import ApiKey
from service.config import Settings
from service.errors import LimitExceeded
from service.jobs.problems import JobProblem, problem_of
from service.jobs.work import run_work, worker_limits


def test_a_worker_gets_the_limits_but_no_secret():
    settings = Settings(database_url="postgresql+psycopg://fanfold:s3cret@db/fanfold",
                        api_keys=[ApiKey(id="ops", sha256="ab" * 32, tenant="acme")],
                        max_series=7, fit_timeout_s=12.0, cors_origins=["https://x.example"])
    limits = worker_limits(settings)
    sent = pickle.dumps(limits)  # what dask sends to the worker
    assert b"s3cret" not in sent and b"abab" not in sent and b"acme" not in sent
    assert limits.database_url == "" and limits.api_keys == []
    assert (limits.max_series, limits.fit_timeout_s) == (7, 12.0)
    assert settings.database_url.endswith("@db/fanfold")  # the service keeps its own


@pytest.mark.parametrize(("error", "status", "title"), [
    (ConstantSeriesError("series 'chains' is constant"), 422,
     "The model cannot use this input"),
    (DateRangeError("dates past 2262", "start"), 422, "The model cannot use this input"),
    (LimitExceeded("keep", "keep: 10 draws is over this server's limit"), 422,
     "The model cannot use this input"),
    (WorkCancelled("deadline"), 503, "Time limit exceeded"),
    (StaleDataError("version"), 409, "Conflict"),
    (KilledWorker("task", "worker", 3), 500, "Worker lost"),
    (JobProblem(404, "Not Found", "model x was deleted"), 404, "Not Found"),
])
def test_errors_that_end_a_job_become_problem_documents(error, status, title):
    problem = problem_of(error, time_limit_s=30.0)
    assert problem is not None and (problem["status"], problem["title"]) == (status, title)
    assert problem["detail"]
    if status == 422:
        assert problem["type"] == f"urn:fanfold:problem:{type(error).__name__}"
    # a document made on a worker comes back unchanged
    assert JobProblem.from_document(problem).problem == problem


def test_an_unexpected_error_has_no_document():
    assert problem_of(RuntimeError("boom"), time_limit_s=1.0) is None


def test_only_the_known_kinds_have_work():
    with pytest.raises(ValueError, match="batch"):
        run_work("batch", {"request": {}}, Settings())
