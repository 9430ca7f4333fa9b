"""Fanfold vs statsmodels wall-time and memory benchmark (not a pytest module).

Usage::

    python tests/benchmarks/run_benchmarks.py [--scenarios S,M,L,XL] [--repeats 3]
        [--out tests/benchmarks/results/latest.md]

Each scenario simulates data from a known stationary VAR(p) with a constant (fixed seed,
companion spectral radius 0.8) and times, in a fresh subprocess per scenario and library:

- Fanfold: ``FanfoldVAR(lags=p, tightness="auto").fit(Y)`` (marginal-likelihood tuning of
  the tightness at fixed p), ``.forecast(12, draws=2000, rng=default_rng(0))`` and
  ``.quantiles([0.05, 0.5, 0.95])``, each piece timed on its own;
- statsmodels: ``VAR(Y).fit(p)`` and ``.forecast_interval(Y[-p:], 12, alpha=0.1)``.

Times are the best of ``--repeats`` runs after one warm-up run (time.perf_counter).
Memory is measured twice in the Fanfold child: the growth of the peak resident set size
(``resource.getrusage(RUSAGE_SELF).ru_maxrss`` after the warm-up run minus before it,
data already in memory) and the tracemalloc peak of one extra run (numpy registers its
buffers with tracemalloc, so array allocations are counted; BLAS work buffers are not).

The "floor" is a lower bound for the fast predictive method: the time to draw the random
numbers it needs (per draw n(n-1)/2 normals and n chi-squares for Sigma, n*h normals
for the paths) plus its main flops divided by the dgemm rate measured at start-up.

Environment variables are reported, never changed: BLAS thread counts are whatever the
machine sets. The machine may be shared; the load average is printed at start and end.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import json
import os
import platform
import resource
import subprocess
import sys
import time
import warnings
from collections.abc import Callable
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
REPO = HERE.parent.parent

HORIZON = 12
DRAWS = 2000
LEVELS = (0.05, 0.5, 0.95)
ALPHA = 0.1
SEED = 20261201

#: name -> (n series, p lags, T observations)
SCENARIOS: dict[str, tuple[int, int, int]] = {
    "S": (3, 4, 120),
    "M": (7, 12, 240),
    "L": (20, 13, 400),
    "XL": (50, 13, 500),
}
#: largest allowed Fanfold / statsmodels time ratio
RATIO_TARGETS = {"S": 5.0, "M": 8.0, "L": 10.0}
#: absolute targets for XL: seconds and bytes
XL_TIME_TARGET = 1.5
XL_MEM_TARGET = 1024**3

ENV_PREFIXES = ("OPENBLAS", "OMP_", "MKL_", "GOTO", "BLIS", "NVPL", "VECLIB", "NUMEXPR",
                "PYTHONHASHSEED")


# ---------------------------------------------------------------------------- data
def simulate_var(n: int, p: int, T: int, *, seed: int = SEED, radius: float = 0.8,
                 burn: int = 200) -> np.ndarray:
    """(T, n) draws from a stationary VAR(p) with constant and identity noise covariance.

    Lag matrices are 0.5 I at lag 1 plus small random cross effects decaying with the
    lag, then scaled (A_l -> c**l A_l, which scales every companion eigenvalue by c) so
    that the companion spectral radius is exactly ``radius``.
    """
    rng = np.random.default_rng([seed, n, p, T])
    lags = []
    for lag in range(1, p + 1):
        a = rng.standard_normal((n, n)) * 0.3 / np.sqrt(n) / lag**1.5
        if lag == 1:
            a += 0.5 * np.eye(n)
        lags.append(a)
    comp = np.zeros((n * p, n * p))
    comp[:n] = np.hstack(lags)
    if p > 1:
        comp[n:, :-n] = np.eye(n * (p - 1))
    c = radius / np.abs(np.linalg.eigvals(comp)).max()
    coef = np.hstack([a * c ** (lag + 1) for lag, a in enumerate(lags)])  # (n, n p)
    const = rng.uniform(-1.0, 1.0, n)
    shocks = rng.standard_normal((T + burn + p, n))
    y = np.zeros((T + burn + p, n))
    for t in range(p, T + burn + p):
        y[t] = const + coef @ y[t - p : t][::-1].ravel() + shocks[t]
    return y[burn + p :]


# ---------------------------------------------------------------------------- children
def _maxrss_bytes() -> int:
    # Linux reports ru_maxrss in KiB (macOS in bytes)
    scale = 1 if sys.platform == "darwin" else 1024
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * scale


#: the speed targets' workload: the configuration from before the automatic one (levels,
#: no seasonal dummies, no dummy observations, tightness by marginal likelihood alone),
#: so that figures stay comparable across sessions
FIXED_CONFIG = {"transforms": None, "seasonal": False, "sum_coef": None, "initial": None,
                "hyperprior": False}


def _fanfold_once(Y: np.ndarray, p: int) -> tuple[dict[str, float], list[str]]:
    from priors import FanfoldVAR

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        c0 = time.process_time()
        t0 = time.perf_counter()
        model = FanfoldVAR(lags=p, tightness="auto", **FIXED_CONFIG).fit(Y)
        t1 = time.perf_counter()
        fc = model.forecast(HORIZON, draws=DRAWS, rng=np.random.default_rng(0))
        t2 = time.perf_counter()
        q = fc.quantiles(list(LEVELS))
        t3 = time.perf_counter()
        c1 = time.process_time()
    assert q.shape == (len(LEVELS), HORIZON, Y.shape[1])
    assert np.all(np.isfinite(q))
    times = {"fit": t1 - t0, "forecast": t2 - t1, "quantiles": t3 - t2, "total": t3 - t0,
             "cpu": c1 - c0, "tightness": float(model.hyper_.tightness)}
    notes = sorted({f"{type(w.message).__name__}: {w.message}"[:120] for w in caught})
    return times, notes


def _fit_breakdown(Y: np.ndarray, p: int) -> dict[str, float]:
    """Time the parts of fit through internal functions (best effort: they may change)."""
    try:
        from priors.conjugate import posterior
        from priors.data import Deterministics, build_design, load_series
        from priors.shrinkage import MinnesotaHyper, ar_residual_variances, minnesota_prior
        from priors.transforms import default_prior_mean
        from priors.tuning import tune_hyperparameters

        base, tune = MinnesotaHyper(), ("tightness",)
        t0 = time.perf_counter()
        series = load_series(Y)
        design = build_design(series, p, Deterministics())
        prior_mean = default_prior_mean(series.transforms)
        psi = ar_residual_variances(design)
        t1 = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = tune_hyperparameters(design, base, prior_mean, tune=tune, psi=psi)
        t2 = time.perf_counter()
        post = posterior(design, minnesota_prior(design, res.hyper, prior_mean, psi))
        t3 = time.perf_counter()
        assert post.log_ml is not None
        return {"design+psi": t1 - t0, "tuning": t2 - t1, "posterior": t3 - t2,
                "evaluations": float(res.evaluations)}
    except Exception as exc:  # internal API drift must not stop the run
        return {"error": f"{type(exc).__name__}: {exc}"}  # type: ignore[dict-item]


def child_fanfold(name: str, repeats: int) -> dict[str, object]:
    import tracemalloc

    n, p, T = SCENARIOS[name]
    Y = simulate_var(n, p, T)
    import scipy.linalg  # noqa: F401

    import priors  # noqa: F401 - import cost outside the measurement

    rss0 = _maxrss_bytes()
    _, notes = _fanfold_once(Y, p)  # warm-up, also the RSS measurement
    rss_peak = _maxrss_bytes() - rss0
    runs = [_fanfold_once(Y, p)[0] for _ in range(repeats)]
    best = {key: min(r[key] for r in runs) for key in ("fit", "forecast", "quantiles", "cpu")}
    best_total = min(runs, key=lambda r: r["total"])
    breakdown = [_fit_breakdown(Y, p) for _ in range(repeats)]
    if all("error" not in b for b in breakdown):
        fit_parts = {key: min(b[key] for b in breakdown) for key in breakdown[0]}
    else:
        fit_parts = breakdown[0]
    tracemalloc.start()
    _fanfold_once(Y, p)
    _, tm_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return {"scenario": name, "n": n, "p": p, "T": T, "k": n * p + 1,
            "total": best_total["total"], "total_cpu": best_total["cpu"],
            "tightness": best_total["tightness"], "pieces": best, "fit_parts": fit_parts,
            "rss_peak": rss_peak, "tracemalloc_peak": tm_peak, "notes": notes,
            "all_totals": [r["total"] for r in runs]}


def child_statsmodels(name: str, repeats: int) -> dict[str, object]:
    n, p, T = SCENARIOS[name]
    Y = simulate_var(n, p, T)
    from statsmodels.tsa.api import VAR

    def once() -> tuple[float, str, list[str]]:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            t0 = time.perf_counter()
            try:
                res = VAR(Y).fit(p)
                mid, lo, hi = res.forecast_interval(Y[-p:], HORIZON, alpha=ALPHA)
                status = "ok"
                nan = [nm for nm, a in (("point", mid), ("lower", lo), ("upper", hi))
                       if not np.all(np.isfinite(a))]
                if nan:
                    status = "non-finite " + "/".join(nan)
            except Exception as exc:  # report, do not stop
                status = f"failed: {type(exc).__name__}: {exc}"[:100]
            t1 = time.perf_counter()
        notes = sorted({f"{type(w.message).__name__}: {w.message}"[:100] for w in caught})
        return t1 - t0, status, notes

    once()
    runs = [once() for _ in range(repeats)]
    return {"scenario": name, "time": min(r[0] for r in runs), "status": runs[0][1],
            "notes": runs[0][2]}


def child_paired(name: str, repeats: int) -> dict[str, object]:
    """Both libraries in one process, alternating run by run (Fanfold, statsmodels,
    Fanfold, ...), so both see the same machine speed: the side-by-side ratio.

    Returns the best time of each and the median of the per-round ratios.
    """
    n, p, T = SCENARIOS[name]
    Y = simulate_var(n, p, T)
    import scipy.linalg  # noqa: F401
    from statsmodels.tsa.api import VAR

    import priors  # noqa: F401

    def sm_once() -> float:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            t0 = time.perf_counter()
            res = VAR(Y).fit(p)
            res.forecast_interval(Y[-p:], HORIZON, alpha=ALPHA)
            return time.perf_counter() - t0

    _fanfold_once(Y, p)
    sm_once()
    rounds = [(_fanfold_once(Y, p)[0]["total"], sm_once()) for _ in range(repeats)]
    ff, sm = zip(*rounds, strict=True)
    return {"scenario": name, "fanfold": min(ff), "statsmodels": min(sm),
            "ratio_best": min(ff) / min(sm),
            "ratio_median": float(np.median([a / b for a, b in rounds]))}


def run_child(kind: str, name: str, repeats: int, blas_threads: int) -> dict[str, object]:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--child", kind,
           "--scenarios", name, "--repeats", str(repeats), "--blas-threads", str(blas_threads)]
    # the child inherits this environment unchanged (BLAS variables included)
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=REPO, check=False)
    if proc.returncode != 0:
        return {"scenario": name, "error": (proc.stderr.strip().splitlines() or ["?"])[-1]}
    return json.loads(proc.stdout.strip().splitlines()[-1])


# ---------------------------------------------------------------------------- floor
def dgemm_gflops(size: int = 1000, repeats: int = 5) -> float:
    rng = np.random.default_rng(0)
    a, b = rng.standard_normal((size, size)), rng.standard_normal((size, size))
    a @ b
    best = min(_timed(lambda: a @ b) for _ in range(repeats))
    return 2.0 * size**3 / best / 1e9


def _timed(fn: Callable[[], object]) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def floor_estimate(n: int, p: int, T: int, gflops: float, repeats: int) -> dict[str, float]:
    """Random-number time plus main flops / dgemm rate for the fast predictive method."""
    k, h, S = n * p + 1, HORIZON, DRAWS
    nobs = T - p
    n_normals = S * (n * (n - 1) // 2 + n * h)
    df = n + 2.0 + nobs
    rng = np.random.default_rng(0)

    def draw() -> None:
        rng.standard_normal(n_normals)
        rng.chisquare(df - np.arange(n), size=(S, n))

    t_rng = min(_timed(draw) for _ in range(repeats))
    simulated = sum(min(t, p) for t in range(h))  # lags simulated, summed over steps
    flops = {
        # [B_bar | R^-1]' applied to the simulated lags of each step
        "simulated_part": 2.0 * (n + k - 1) * n * simulated * S,
        "gram": 2.0 * k * S * (h * (h - 1) / 2 + h),  # v_g'v_h and v_h'v_h
        "sigma_roots": S * (n**3 / 3.0 + 2.0 * n * n * h),  # A^-1 L_S' + M u per step
        "qr": 4.0 * (nobs + k) * k * k - 4.0 / 3.0 * k**3,  # Householder QR, R and Q
        "eigh": 4.0 * (k - 1) ** 3,  # symmetric eigendecomposition with vectors (D&C)
    }
    t_flops = sum(flops.values()) / (gflops * 1e9)
    return {"rng": t_rng, "flops": sum(flops.values()), "flop_time": t_flops,
            "floor": t_rng + t_flops, "normals": float(n_normals)}


# ---------------------------------------------------------------------------- header
def cpu_model() -> str:
    """The processor's model name from /proc/cpuinfo ("?" where unknown)."""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return "?"


def repo_commit(*folders: str) -> str:
    """The short commit, noting uncommitted changes under ``folders``."""
    try:
        commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=REPO,
                                capture_output=True, text=True, check=False).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", *folders], cwd=REPO,
                               capture_output=True, text=True, check=False).stdout.strip()
    except OSError:
        return "?"
    where = " or ".join(f"{f}/" for f in folders)
    return commit + (f" ({where} has uncommitted changes)" if dirty else "")


def machine_header(gflops: float) -> list[str]:
    import scipy
    import scipy.linalg  # noqa: F401 - loads scipy's own OpenBLAS
    import threadpoolctl

    try:
        import statsmodels
        import statsmodels.tsa.api  # noqa: F401

        sm_version = statsmodels.__version__
    except ImportError:
        sm_version = "not installed"
    import priors  # noqa: F401

    cpu, commit = cpu_model(), repo_commit("priors")
    env = {k: v for k, v in sorted(os.environ.items()) if k.startswith(ENV_PREFIXES)}
    lines = [
        f"- date: {_dt.datetime.now().isoformat(timespec='seconds')}; repo commit {commit}",
        f"- machine: {platform.machine()} {cpu}; nproc {os.cpu_count()}; "
        f"load average at start {os.getloadavg()[0]:.2f} (shared machine: see end)",
        f"- python {platform.python_version()}, numpy {np.__version__}, scipy "
        f"{scipy.__version__}, statsmodels {sm_version}",
        f"- dgemm rate (1000x1000 matmul, numpy, best of 5): {gflops:.1f} GFLOP/s",
        f"- OPENBLAS_CORETYPE: {os.environ.get('OPENBLAS_CORETYPE', '(unset)')}; "
        "BLAS-related env: "
        + (", ".join(f"{k}={v}" for k, v in env.items()) or "(none)"),
        "- BLAS thread pools (threadpoolctl, after importing numpy, scipy.linalg, "
        "statsmodels, priors):",
    ]
    for info in threadpoolctl.threadpool_info():
        lines.append(
            f"  - {info.get('internal_api')} {info.get('version')} "
            f"({Path(info.get('filepath', '?')).parent.parent.name}/"
            f"{Path(info.get('filepath', '?')).name}), {info.get('num_threads')} threads, "
            f"arch {info.get('architecture')}, layer {info.get('threading_layer')}"
        )
    return lines


# ---------------------------------------------------------------------------- report
def _fmt_s(x: float | None) -> str:
    return "n/a" if x is None else f"{x:.3f}"


def _mib(x: float) -> str:
    return f"{x / 2**20:.0f}"


def build_report(results: list[dict], header: list[str], repeats: int,
                 floors: dict[str, dict[str, float]]) -> str:
    out = ["# Fanfold benchmark", "", *header, "",
           f"Workload: h={HORIZON}, draws={DRAWS}, quantiles {list(LEVELS)}; statsmodels "
           f"forecast_interval alpha={ALPHA}. Times in seconds, best of {repeats} after one "
           "warm-up, each scenario and library in a fresh subprocess; then a paired run: "
           f"both libraries in one process, alternating, {max(repeats, 15)} rounds. The "
           "ratio targets are judged on the paired run (same machine speed for both); "
           "'paired ratio' is best/best (median of the per-round ratios).", ""]
    out += ["| scenario | n, p, T (k) | Fanfold s (median) | CPU s | statsmodels s | "
            "SM intervals | ratio FF/SM (separate) | paired ratio | target | pass | floor s | "
            "FF/floor | RSS peak +MiB | tracemalloc peak MiB |",
            "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in results:
        ff, sm, name = r["fanfold"], r["statsmodels"], r["scenario"]
        n, p, T = SCENARIOS[name]
        fl = floors[name]["floor"]
        if "error" in ff:
            out.append(f"| {name} | {n}, {p}, {T} | error: {ff['error']} | | | | | | | FAIL "
                       "| | | | |")
            continue
        tot = ff["total"]
        sm_t = sm.get("time")
        ratio = tot / sm_t if sm_t else None
        pr = r.get("paired", {})
        paired = pr.get("ratio_best")
        paired_txt = ("n/a" if paired is None
                      else f"{paired:.1f}x ({pr['ratio_median']:.1f}x)")
        if name in RATIO_TARGETS:
            target = f"<= {RATIO_TARGETS[name]:g}x SM"
            ok = paired is not None and paired <= RATIO_TARGETS[name]
        elif name == "XL":
            target = f"< {XL_TIME_TARGET} s and < 1 GiB"
            mem = max(ff["rss_peak"], ff["tracemalloc_peak"])
            ok = tot < XL_TIME_TARGET and mem < XL_MEM_TARGET
        else:
            target, ok = "-", True
        sm_status = sm.get("status", sm.get("error", "?"))
        out.append(
            f"| {name} | {n}, {p}, {T} ({n * p + 1}) | {tot:.3f} "
            f"({float(np.median(ff['all_totals'])):.3f}) | {ff['total_cpu']:.3f} "
            f"| {_fmt_s(sm_t)} | {sm_status} | "
            f"{'n/a' if ratio is None else f'{ratio:.1f}x'} | {paired_txt} | {target} | "
            f"{'pass' if ok else 'FAIL'} | {fl:.3f} | {tot / fl:.1f}x | "
            f"{_mib(ff['rss_peak'])} | {_mib(ff['tracemalloc_peak'])} |"
        )
    out += ["", "Fanfold pieces (best of each piece; fit parts via internal functions):", "",
            "| scenario | fit | forecast (predictive simulation) | quantiles | "
            "fit: design+psi | fit: tuning (evals) | fit: posterior | tightness |",
            "|---|---|---|---|---|---|---|---|"]
    for r in results:
        ff, name = r["fanfold"], r["scenario"]
        if "error" in ff:
            continue
        pc, fp = ff["pieces"], ff["fit_parts"]
        if "error" in fp:
            parts = f"n/a ({fp['error']}) | | "
        else:
            parts = (f"{fp['design+psi']:.4f} | {fp['tuning']:.4f} "
                     f"({fp['evaluations']:.0f}) | {fp['posterior']:.4f}")
        out.append(f"| {name} | {pc['fit']:.4f} | {pc['forecast']:.4f} | "
                   f"{pc['quantiles']:.4f} | {parts} | {ff['tightness']:.4f} |")
    out += ["", "Floor (fast predictive): random numbers + main flops / dgemm rate:", "",
            "| scenario | normals + chi2 time s | main GFLOP | flop time s | floor s |",
            "|---|---|---|---|---|"]
    for r in results:
        f = floors[r["scenario"]]
        out.append(f"| {r['scenario']} | {f['rng']:.4f} | {f['flops'] / 1e9:.2f} | "
                   f"{f['flop_time']:.4f} | {f['floor']:.4f} |")
    notes = []
    for r in results:
        for lib in ("fanfold", "statsmodels"):
            for note in r[lib].get("notes", []):
                notes.append(f"- {r['scenario']} {lib}: {note}")
    out += ["", "Notes:", "",
            "- Memory: 'RSS peak +MiB' is getrusage(RUSAGE_SELF).ru_maxrss growth over one "
            "full fit+forecast+quantiles run in a fresh subprocess (data and imports already "
            "loaded); 'tracemalloc peak' is the tracemalloc peak of one run (includes numpy "
            "buffers). The XL memory target uses the larger of the two.",
            "- Floor flops: 2 (n+k-1) n S sum_t min(t, p) ([B_bar | R^-1]' times the "
            "simulated lags), 2 k S (h(h-1)/2 + h) (inner products of the v_h), "
            "S (n^3/3 + 2 n^2 h) (Sigma roots and M u), 4 N k^2 - 4k^3/3 (QR of the "
            "N = T-p+k stacked rows), 4 (k-1)^3 (eigh); random numbers per draw: "
            "n(n-1)/2 normals + n chi-squares (Sigma) + n h normals (paths).",
            "- Fanfold s is the best total of the repeats (median in brackets); CPU s is the "
            "process CPU time of that run over all threads: about 2x the wall time means the "
            "BLAS worker threads were busy-waiting rather than computing.",
            "- The ratio and pass/fail use the best times of both libraries.",
            f"- load average at end: {os.getloadavg()[0]:.2f}",
            *notes, ""]
    return "\n".join(out)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--scenarios", default="S,M,L,XL")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--out", default=str(HERE / "results" / "latest.md"))
    ap.add_argument("--blas-threads", type=int, default=1,
                    help="BLAS threads in both libraries' runs (threadpoolctl); 0 = library "
                         "default. One thread was fastest for every scenario on the 2-core "
                         "machines (numpy and scipy each bring an OpenBLAS pool)")
    ap.add_argument("--child", choices=("fanfold", "statsmodels", "paired"),
                    help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    names = [s.strip().upper() for s in args.scenarios.split(",") if s.strip()]
    unknown = [s for s in names if s not in SCENARIOS]
    if unknown:
        ap.error(f"unknown scenarios {unknown}; choose from {', '.join(SCENARIOS)}")
    if args.repeats < 1:
        ap.error("--repeats must be >= 1")

    sys.path.insert(0, str(REPO))  # this checkout's priors/, whatever is installed
    if args.child:
        fn = {"fanfold": child_fanfold, "statsmodels": child_statsmodels,
              "paired": child_paired}[args.child]
        if args.blas_threads > 0:
            import scipy.linalg  # noqa: F401 - load scipy's OpenBLAS before limiting it
            from threadpoolctl import threadpool_limits

            threadpool_limits(limits=args.blas_threads, user_api="blas")
        print(json.dumps(fn(names[0], args.repeats)))
        return 0

    gflops = dgemm_gflops()
    header = machine_header(gflops)
    header.append(f"- BLAS threads in the timed runs (both libraries): "
                  f"{args.blas_threads or 'library default'}")
    results, floors = [], {}
    for name in names:
        print(f"[{name}] fanfold ...", file=sys.stderr, flush=True)
        ff = run_child("fanfold", name, args.repeats, args.blas_threads)
        print(f"[{name}] statsmodels ...", file=sys.stderr, flush=True)
        sm = run_child("statsmodels", name, args.repeats, args.blas_threads)
        print(f"[{name}] paired ...", file=sys.stderr, flush=True)
        paired = run_child("paired", name, max(args.repeats, 15), args.blas_threads)
        floors[name] = floor_estimate(*SCENARIOS[name], gflops, args.repeats)
        results.append({"scenario": name, "fanfold": ff, "statsmodels": sm, "paired": paired})
    write_report(build_report(results, header, args.repeats, floors), args.out)
    return 0


def write_report(report: str, out: str | Path) -> None:
    """Print the report and write it to ``out`` (folders created)."""
    print(report)
    path = Path(out)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(report)
    print(f"written to {path}", file=sys.stderr)


if __name__ == "__main__":
    raise SystemExit(main())
