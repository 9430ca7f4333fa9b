"""``fanfold batch DATA.csv --group-by warehouse,family --horizon 12 --out results.parquet``.

One model per group of a long table (date, group columns, series, value), run on
dask.distributed (:mod:`service.batch`): a LocalCluster on this machine, or the
scheduler of ``--scheduler`` / ``FANFOLD_DASK_ADDRESS`` (TLS from the
``FANFOLD_DASK_TLS_*`` settings). Writes the forecasts to ``--out`` and the status of
every group beside it (``results.status.parquet``), and prints a summary.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from typing import Any

from ..batch.output import forecast_frame, status_frame, status_path, write_table
from ..batch.runner import batch_client, dask_security, run_batch
from ..batch.table import Columns, parse_group_by, read_table, split_groups
from ..batch.worker import ForecastSpec
from .commands import (
    SEED_RULE,
    InputError,
    UsageError,
    _integer,
    _interactive,
    _model_params,
    _one_line,
    _positive_int,
    _quantiles,
    _seed,
)

__all__ = ["add_batch_command", "line_progress"]


def line_progress(label: str, *, every_s: float = 2.0, stream: Any = None
                  ) -> Callable[[int, int], None]:
    """A ``progress(done, total)`` that redraws one line on a terminal, and elsewhere
    (logs, pipes) prints a line at most every ``every_s`` seconds and at the end."""
    last = -float("inf")
    started = time.monotonic()

    def progress(done: int, total: int) -> None:
        nonlocal last
        out = stream or sys.stderr
        now = time.monotonic()
        text = (f"fanfold: {label} {done}/{total} groups ({100 * done // max(total, 1)}%, "
                f"{now - started:.0f} s)")
        if _interactive() and stream is None:
            bar = "#" * (30 * done // max(total, 1))
            print(f"\r{text} [{bar:<30}]", end="\n" if done >= total else "", file=out,
                  flush=True)
        elif done >= total or now - last >= every_s:
            print(text, file=out, flush=True)
        else:
            return
        last = now

    return progress


def add_batch_command(sub: Any, *, parents: list[argparse.ArgumentParser],
                      formatter_class: type[argparse.HelpFormatter]) -> None:
    """Register ``batch`` on the ``fanfold`` subparsers."""
    b = sub.add_parser(
        "batch", help="forecast every group of a long table, one model each (Dask)",
        description="Read a long table (a date column, the --group-by columns, a series "
                    "column and a value column; CSV or Parquet), fit one model per group "
                    "and forecast it, on a local Dask cluster or a scheduler. A group that "
                    "cannot be forecast is reported with its error; the others go on.",
        parents=parents, formatter_class=formatter_class)
    b.add_argument("data", metavar="DATA.csv|DATA.parquet", help="the long table")
    b.add_argument("--group-by", required=True, type=parse_group_by, metavar="COL,...",
                   help="the columns whose labels make a group, e.g. warehouse,family")
    b.add_argument("--horizon", type=_positive_int, required=True, metavar="H",
                   help="periods ahead")
    b.add_argument("--out", required=True, metavar="FILE.parquet|FILE.csv",
                   help="the forecasts: group columns, series, date, step, mean, "
                        "q<level>...; the status of each group goes beside it "
                        "(FILE.status.parquet)")
    b.add_argument("--status-out", metavar="FILE",
                   help="where the status table goes instead (default: beside --out)")
    b.add_argument("--draws", type=_positive_int, default=1000, metavar="N",
                   help="simulated paths per group")
    b.add_argument("--quantiles", type=_quantiles, default="0.05,0.5,0.95", metavar="Q,...",
                   help="comma-separated quantile levels in (0, 1)")
    b.add_argument("--seed", type=_seed, metavar="S",
                   help="batch seed; each group's seed is derived from it and the group's "
                        f"labels, so a group's forecast is the same in any batch; {SEED_RULE}")
    b.add_argument("--date-column", default="date", metavar="NAME", help="the date column")
    b.add_argument("--series-column", default="series", metavar="NAME",
                   help="the column naming the series within a group")
    b.add_argument("--value-column", default="value", metavar="NAME", help="the values")
    d = b.add_argument_group("Dask")
    d.add_argument("--scheduler", metavar="ADDRESS",
                   help="the scheduler, e.g. tls://scheduler:8786 (default: "
                        "FANFOLD_DASK_ADDRESS, else a local cluster)")
    d.add_argument("--local-workers", type=_integer(0), default=0, metavar="N",
                   help="worker processes of the local cluster; 0 = one per core")
    d.add_argument("--chunk-size", type=_integer(0), default=0, metavar="N",
                   help="groups per task; 0 = about four tasks per worker, at most 50")
    d.add_argument("--retries", type=_integer(0), default=2, metavar="N",
                   help="re-runs of a task that raised an error")
    b.set_defaults(run=_batch)


def _batch(args: argparse.Namespace) -> str:
    from ..config import get_settings

    settings = get_settings()
    if not args.out.lower().endswith((".parquet", ".pq", ".csv")):
        raise UsageError(f"--out {args.out!r}: name it .parquet or .csv")
    columns = Columns(args.group_by, args.date_column, args.series_column, args.value_column)
    try:
        frame = read_table(args.data)
    except FileNotFoundError:
        raise InputError(f"data file {args.data!r} not found") from None
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot read data file {args.data!r}: {_one_line(exc)}") from exc
    groups = split_groups(frame, columns)
    spec = ForecastSpec(_model_params(args), args.horizon, args.draws, tuple(args.quantiles),
                        args.seed, args.blas_threads)
    address = args.scheduler or settings.dask_address
    security = dask_security(ca_file=settings.dask_tls_ca_file,
                             cert_file=settings.dask_tls_cert_file,
                             key_file=settings.dask_tls_key_file)
    where = address or f"a local cluster ({args.local_workers or 'one worker per core'})"
    print(f"fanfold: {len(groups.groups) + len(groups.rejected)} groups on {where}",
          file=sys.stderr, flush=True)
    try:
        with batch_client(address=address, security=security,
                          workers=args.local_workers) as client:
            done = run_batch(client, groups.groups, spec, chunk_size=args.chunk_size,
                             retries=args.retries, progress=line_progress("batch"))
    except (OSError, TimeoutError) as exc:
        raise InputError(f"cannot run the batch on {where}: {_one_line(exc)}") from exc
    outcomes = sorted(done + groups.rejected, key=lambda g: g.key)
    status = status_frame(outcomes, args.group_by)
    status_file = args.status_out or str(status_path(args.out))
    for table, path in ((forecast_frame(outcomes, args.group_by, args.quantiles), args.out),
                        (status, status_file)):
        try:
            write_table(table, path)
        except (OSError, ValueError) as exc:
            raise InputError(f"cannot write {path!r}: {_one_line(exc)}") from exc
    return _summary(status, args, status_file)


def _summary(status: Any, args: argparse.Namespace, status_file: str) -> str:
    bad = status[status["status"] != "ok"]
    lines = [f"{len(status)} groups: {len(status) - len(bad)} forecast, {len(bad)} failed "
             f"(seed {args.seed})", f"forecasts: {args.out}", f"status: {status_file}"]
    for _, row in bad.head(20).iterrows():
        key = ", ".join(str(row[c]) for c in args.group_by)
        lines.append(f"  failed {key}: {row['error_type']}: {row['error']}")
    if len(bad) > 20:
        lines.append(f"  ... and {len(bad) - 20} more (see the status file)")
    return "\n".join(lines)
