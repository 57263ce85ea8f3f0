"""Speed and memory of the moment engine against one linearmodels fit.

On seeded synthetic data (1 endogenous regressor, 3 instruments, 20 controls, one
fixed effect with 1,000 levels, n/20 clusters) this measures, at each sample size n:

- the wall time of the main estimate set, ``reportkit.estimation.estimate`` with the
  cluster covariance and OLS, 2SLS, LIML and GMM (BLAS held to one thread with
  threadpoolctl, as the pipeline does), and of its steps, replayed one by one;
- the wall time of ONE clustered 2SLS fit by linearmodels (``IV2SLS``) on the same data
  in the same process, with the fixed effect as dummy columns when they fit in memory
  and the fit stays quick (``--dummies-max-rows``), otherwise on columns already
  demeaned within the fixed effect (pandas groupby), the absorbed levels declared
  through ``extra_df`` so that the standard errors match;
- the peak memory the estimate set allocates (tracemalloc traces numpy's buffers),
  as a multiple of the raw numeric data (n x numeric columns x 8 bytes).

The project's targets: the whole estimate set faster than the single linearmodels fit at
n = 10^6, and peak extra memory at most 3x the raw numeric data. Data generation and the
building of linearmodels' inputs are not timed (the demeaning is timed and shown apart).

``--suite`` times the diagnostics suite instead, at n = 10^6 with n/20 = 50,000 clusters,
in interleaved rounds: the engine's own main fit (``compute_moments``, the cluster index
and ``estimators.tsls``), the whole ``estimate()`` (every estimator, first stages,
strength, weak-IV-robust sets, over-identification, endogeneity), instrument strength and
weak-IV-robust inference alone on the main fit's moments, and one linearmodels clustered
IV2SLS fit. Targets: the whole suite within 3x the main fit, and faster than linearmodels.

``--demo`` times ``python -m reportkit demo DIR --timings`` end to end in subprocesses
(a fresh temporary DIR each run) and collects the stage times it prints.

Run from the repository root:  python benchmarks/bench_engine.py --sizes 10000 100000 1000000
(or ``--suite``, or ``--demo``)
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import platform
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc
import warnings
from collections.abc import Callable, Iterator
from contextlib import AbstractContextManager, contextmanager
from dataclasses import dataclass, field
from functools import partial
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_info, threadpool_limits

# benchmark the checkout this file lives in, not an installed copy
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from reportkit.checks.endogeneity import durbin_wu_hausman
from reportkit.checks.overid import hansen_j, sargan
from reportkit.checks.overid_extra import basmann, c_statistics
from reportkit.checks.strength import instrument_strength
from reportkit.checks.weak_iv import weak_iv_inference
from reportkit.engine.absorb import build_partialler
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.design import Design
from reportkit.engine.estimators import ESTIMATOR_FUNCTIONS, EstimateArrays, tsls
from reportkit.engine.firststage import binned_first_stage, fit_on_instruments
from reportkit.engine.moments import Moments, compute_moments
from reportkit.estimation import estimate

ESTIMATORS = ["ols", "2sls", "liml", "gmm"]
N_CONTROLS = 20
N_INSTRUMENTS = 3
FE_LEVELS = 1_000
ROWS_PER_CLUSTER = 20
MEMORY_TARGET = 3.0  # peak extra memory / raw numeric data (project target)
# linearmodels holds several dense copies of the regressor and instrument matrices
# (its own data, [exog endog], [exog instruments], the pseudo-inverse, SVD work);
# eight copies is a deliberate over-estimate (not measured) so that the dummy design
# is tried only when it surely fits in memory
LM_DENSE_COPIES = 8
MEMORY_SAFETY = 0.7  # use at most this share of the available memory
# with ~1,000 dummy columns linearmodels' fit costs O(n k^2) (seven SVDs of the n x k
# matrices): 18-45 s at n = 10^4 and 220-240 s at 10^5 on a shared 2-core machine;
# above this many rows "auto" demeans instead, to keep the whole run within minutes
DUMMIES_MAX_ROWS = 20_000


# ---------------------------------------------------------------------------- data
def make_design(n: int, seed: int, fe_levels: int = FE_LEVELS) -> Design:
    """Seeded synthetic IV data: x is endogenous (shares u with y), z shifts x.

    ``fe_levels = 0`` gives no fixed effect (the engine then adds a constant).

    Fixed-effect levels and clusters are balanced (every level has n / levels rows,
    every cluster ROWS_PER_CLUSTER), so there are no singletons: a Design comes from
    the data stage with singletons removed.
    """
    if n < 2 * fe_levels or n < 2 * ROWS_PER_CLUSTER:
        raise ValueError(f"n = {n:,} is too small: need at least {2 * fe_levels:,} rows")
    rng = np.random.default_rng([seed, n])
    controls = rng.normal(size=(n, N_CONTROLS))
    fe = rng.permutation(np.arange(n) % max(fe_levels, 1))
    clusters = rng.permutation(np.arange(n) // ROWS_PER_CLUSTER)
    fe_effect = rng.normal(size=fe_levels)[fe] if fe_levels else np.zeros(n)
    cluster_shock = 0.5 * rng.normal(size=int(clusters.max()) + 1)[clusters]
    z = rng.normal(size=(n, N_INSTRUMENTS)) + 0.3 * controls[:, :1]
    u = rng.normal(size=n) + cluster_shock
    x = z @ np.array([0.4, 0.25, 0.1]) + 0.6 * u + controls[:, 1] + fe_effect
    x = x + rng.normal(size=n)
    y = 1.5 * x + controls @ np.linspace(-0.5, 0.5, N_CONTROLS) + 2.0 * fe_effect + u
    return Design(
        y=y,
        endog=x[:, None],
        instruments=z,
        controls=controls,
        fixed_effects=fe[:, None].astype(np.int64) if fe_levels else np.zeros((n, 0), np.int64),
        clusters=clusters[:, None].astype(np.int64),
        weights=None,
        outcome_name="y",
        endog_names=("x",),
        instrument_names=tuple(f"z{j}" for j in range(N_INSTRUMENTS)),
        control_names=tuple(f"c{j}" for j in range(N_CONTROLS)),
        fixed_effect_names=("group",) if fe_levels else (),
        cluster_names=("cluster",),
    )


def raw_numeric(design: Design) -> tuple[int, int]:
    """(bytes, columns) of the numeric data the engine receives."""
    arrays = [
        design.y[:, None],
        design.endog,
        design.instruments,
        design.controls,
        design.fixed_effects,
        design.clusters,
    ]
    return sum(a.nbytes for a in arrays), sum(a.shape[1] for a in arrays)


# -------------------------------------------------------------------------- engine
def run_estimate(design: Design):  # type: ignore[no-untyped-def]
    return estimate(
        design,
        covariance="cluster",
        estimators=ESTIMATORS,
        confidence_level=0.95,
        labels={},
        crosscheck="never",
    )


def time_estimate(design: Design, repeats: int):  # type: ignore[no-untyped-def]
    """Wall times of ``repeats`` estimate() calls, and the last call's output."""
    times, out = [], None
    for _ in range(max(repeats, 1)):
        out = None
        gc.collect()
        t0 = time.perf_counter()
        out = run_estimate(design)
        times.append(time.perf_counter() - t0)
    return times, out


def replay_estimate(design: Design, step: Callable[[str], AbstractContextManager[None]]) -> None:
    """The steps of ``estimate`` one by one, each inside ``step(name)``.

    Mirrors estimation.estimate and moments.compute_moments; the sum of the steps is
    printed beside the whole call so that a drift between the two shows.
    """
    with step("partialling: fixed-effect index, controls QR"):
        part = build_partialler(design)
    with step("partialling: y, x, z"):
        cols = np.column_stack([design.y, design.endog, design.instruments])
        t = part.transform(cols)
        p = design.endog.shape[1]
        m = Moments(
            y=np.ascontiguousarray(t[:, 0]),
            x=np.ascontiguousarray(t[:, 1 : 1 + p]),
            z=np.ascontiguousarray(t[:, 1 + p :]),
            k_exog=part.df_absorbed,
            partialler=part,
        )
        del cols, t
    with step("cross-products (Gram matrix)"):
        _ = m.gram, m.zz_inv, m.pi, m.xpx, m.xpy
    with step("cluster index"):
        cov = CovarianceSpec.build("cluster", design.clusters)
        label = cov.describe(design.cluster_names)
    fits = {}
    for name in ESTIMATORS:
        with step(f"estimator {name}"):
            fits[name] = ESTIMATOR_FUNCTIONS[name](m, cov)
    with step("first stage fits"):
        first = [fit_on_instruments(m, m.x[:, j], cov) for j in range(m.p)]
    with step("first stage binned scatter"):
        for j in range(m.p):
            binned_first_stage(m, design.endog, design.instruments, j, design.weights)
    with step("reduced form"):
        fit_on_instruments(m, m.y, cov)
    with step("Sargan, Basmann, Hansen J, Durbin-Wu-Hausman"):
        sargan(m, fits["2sls"].params)
        basmann(m, fits["2sls"].params)
        hansen_j(m, fits["gmm"], "cluster", label)
        durbin_wu_hausman(m, cov, label)
    with step("C statistics (one per instrument)"):
        c_statistics(m, cov, label, design.instrument_names, {})
    with step("instrument strength"):
        instrument_strength(m, cov, label, design.endog_names, {})
    with step("weak-IV-robust inference (AR, CLR, tF)"):
        weak_iv_inference(
            m, cov, label, design.endog_names, {}, 0.95, fits["2sls"], first[0].wald / m.q
        )


def time_steps(design: Design) -> dict[str, float]:
    out: dict[str, float] = {}

    @contextmanager
    def step(name: str) -> Iterator[None]:
        t0 = time.perf_counter()
        yield
        out[name] = time.perf_counter() - t0

    gc.collect()
    replay_estimate(design, step)
    return out


COMPREHENSIONS = ("<dictcomp>", "<listcomp>", "<setcomp>", "<genexpr>")
SHOW_SECONDS = 0.001  # callees under this at every size are summed into one row
ProfileTable = dict[tuple[str, int, str], tuple]  # type: ignore[type-arg]  # pstats' raw table


def profile_estimate(design: Design) -> dict[str, float]:
    """Seconds of one estimate() call by the functions it calls directly (cProfile).

    Unlike the replay, this follows whatever estimate() computes today. Comprehensions
    are opened one level so that each estimator shows by name; "estimate() itself" is
    the time spent in its own lines.
    """
    return callees_of_estimate(profile_table(design))


def profile_table(design: Design) -> ProfileTable:
    """cProfile's raw table (pstats.Stats.stats) of one estimate() call."""
    import cProfile
    import pstats

    gc.collect()
    prof = cProfile.Profile()
    prof.enable()
    run_estimate(design)
    prof.disable()
    return pstats.Stats(prof).stats  # type: ignore[attr-defined,no-any-return]


def _func_label(key: tuple[str, int, str]) -> str:
    return f"{Path(key[0]).stem}.{key[2]}" if key[0] != "~" else key[2]


def top_functions(table: ProfileTable, count: int) -> list[tuple[str, int, float, float]]:
    """The ``count`` functions with the most own time: (name, calls, own s, cumulative s)."""
    rows = [
        (f"{_func_label(key)}:{key[1]}", int(v[1]), float(v[2]), float(v[3]))
        for key, v in table.items()
    ]
    rows.sort(key=lambda r: -r[2])
    return rows[:count]


def callees_of_estimate(table: ProfileTable) -> dict[str, float]:
    """Seconds of estimate() split by the functions it calls directly."""
    root = next(k for k in table if k[2] == "estimate" and k[0].endswith("estimation.py"))

    def callees(parent: tuple[str, int, str]) -> list[tuple[tuple[str, int, str], float]]:
        out = []
        for key, (_, _, _, _, callers) in table.items():
            if parent in callers:
                out.append((key, callers[parent][3]))  # cumulative time on this edge
        return out

    times: dict[str, float] = {"estimate() itself": table[root][2]}
    for key, seconds in callees(root):
        if key[2] in COMPREHENSIONS:
            times["estimate() itself"] += table[key][2]
            for sub, sub_seconds in callees(key):
                name = _func_label(sub)
                times[name] = times.get(name, 0.0) + sub_seconds
        else:
            name = _func_label(key)
            times[name] = times.get(name, 0.0) + seconds
    times["whole estimate() (profiled)"] = table[root][3]
    return times


def peak_memory(design: Design) -> int:
    """Peak bytes allocated during one estimate call (arrays created before excluded)."""
    gc.collect()
    tracemalloc.start()
    try:
        run_estimate(design)
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def peak_memory_steps(design: Design) -> dict[str, int]:
    """Peak traced bytes (since the start of the replay) reached within each step."""
    out: dict[str, int] = {}

    @contextmanager
    def step(name: str) -> Iterator[None]:
        tracemalloc.reset_peak()
        yield
        out[name] = tracemalloc.get_traced_memory()[1]

    gc.collect()
    tracemalloc.start()
    try:
        replay_estimate(design, step)
    finally:
        tracemalloc.stop()
    return out


# -------------------------------------------------------------------- linearmodels
@dataclass
class LinearmodelsRun:
    fe_handling: str  # "dummies" | "demeaned" | "none" (no fixed effect) | "skipped"
    seconds: float = float("nan")
    cpu_seconds: float = float("nan")  # this process's CPU time over the same span
    prep_seconds: float = float("nan")  # demeaning (timed) or dummy building (not counted)
    coef: float = float("nan")
    std_error: float = float("nan")
    note: str = ""


def available_memory() -> int | None:
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None


def dummy_design_bytes(design: Design, fe_levels: int) -> int:
    """Rough peak of linearmodels with the fixed effect as dummy columns."""
    columns = (
        fe_levels + design.controls.shape[1] + design.endog.shape[1] + design.instruments.shape[1]
    )
    return LM_DENSE_COPIES * design.n * columns * 8


def choose_fe_handling(design: Design, requested: str, max_rows: int) -> tuple[str, str]:
    """Dummies when they surely fit in memory and the fit stays quick, else demeaned."""
    if design.fixed_effects.shape[1] == 0:
        return "none", "no fixed effect"
    levels = int(np.unique(design.fixed_effects[:, 0]).size)
    need = dummy_design_bytes(design, levels)
    avail = available_memory()
    have = "unknown" if avail is None else f"{avail / 2**30:.1f} GiB"
    memory = f"dummies need about {need / 2**30:.1f} GiB, {have} available"
    if requested != "auto":
        return requested, f"as requested; {memory}"
    if avail is None or need > MEMORY_SAFETY * avail:
        return "demeaned", f"{memory}: too much"
    if design.n > max_rows:
        return "demeaned", f"{memory}, but n > --dummies-max-rows {max_rows:,} (fit too slow)"
    return "dummies", memory


def linearmodels_inputs(design: Design, fe_handling: str):  # type: ignore[no-untyped-def]
    """(dependent, exog, endog, instruments, extra fit options, seconds of demeaning)."""
    import pandas as pd

    codes = design.fixed_effects[:, 0] if design.fixed_effects.shape[1] else None
    ctrl_names = list(design.control_names)
    frame = pd.DataFrame(
        np.column_stack([design.y, design.endog, design.instruments, design.controls]),
        columns=["y", "x", *design.instrument_names, *ctrl_names],
    )
    extra: dict[str, int] = {}
    prep = float("nan")
    if fe_handling == "dummies":
        levels = np.unique(codes)
        dummies = np.zeros((design.n, levels.size - 1))
        pos = np.searchsorted(levels, codes)
        rows = np.nonzero(pos > 0)[0]
        dummies[rows, pos[rows] - 1] = 1.0
        exog = pd.concat(
            [
                pd.DataFrame({"const": np.ones(design.n)}),
                frame[ctrl_names],
                pd.DataFrame(dummies, columns=[f"group_{v}" for v in levels[1:]]),
            ],
            axis=1,
        )
        del dummies
    elif fe_handling == "none":
        exog = pd.concat([pd.DataFrame({"const": np.ones(design.n)}), frame[ctrl_names]], axis=1)
    else:
        t0 = time.perf_counter()
        means = frame.groupby(codes).transform("mean")
        frame = frame - means
        prep = time.perf_counter() - t0
        del means
        exog = frame[ctrl_names]
        extra["extra_df"] = int(np.unique(codes).size)
    return (
        frame["y"],
        exog,
        frame[["x"]],
        frame[list(design.instrument_names)],
        extra,
        prep,
    )


def time_linearmodels(design: Design, fe_handling: str) -> LinearmodelsRun:
    from linearmodels.iv import IV2SLS

    dep, exog, endog, instr, extra, prep = linearmodels_inputs(design, fe_handling)
    clusters = design.clusters[:, 0]
    gc.collect()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        c0, t0 = time.process_time(), time.perf_counter()
        res = IV2SLS(dep, exog, endog, instr).fit(
            cov_type="clustered", clusters=clusters, debiased=True, **extra
        )
        coef, se = float(res.params["x"]), float(res.std_errors["x"])
        seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    return LinearmodelsRun(fe_handling, seconds, cpu, prep, coef, se)


# ------------------------------------------------------------------------- driver
@dataclass
class SizeResult:
    n: int
    raw_bytes: int
    raw_columns: int
    engine_times: list[float]
    steps: dict[str, float]
    callees: dict[str, float]
    peak_bytes: int
    peak_steps: dict[str, int]
    lm: LinearmodelsRun
    fe_reason: str
    coef_rel_diff: float
    se_rel_diff: float
    extra: dict[str, float] = field(default_factory=dict)

    @property
    def engine_median(self) -> float:
        return statistics.median(self.engine_times)

    @property
    def speed_ratio(self) -> float:
        return self.lm.seconds / self.engine_median

    @property
    def memory_ratio(self) -> float:
        return self.peak_bytes / self.raw_bytes


def warm_up(seed: int, with_linearmodels: bool) -> None:
    """Imports and first-call set-up outside the timings."""
    small = make_design(5_000, seed)
    run_estimate(small)
    if with_linearmodels:
        time_linearmodels(small, "demeaned")
        time_linearmodels(make_design(5_000, seed, fe_levels=20), "dummies")


def bench_one(n: int, args: argparse.Namespace) -> SizeResult:
    design = make_design(n, args.seed)
    raw_bytes, raw_cols = raw_numeric(design)
    times, out = time_estimate(design, args.repeats)
    tsls = out.fits["2sls"]
    del out
    steps = time_steps(design)
    callees = profile_estimate(design)
    peak = peak_memory(design)
    peak_steps = peak_memory_steps(design)
    if args.skip_linearmodels:
        lm, reason = LinearmodelsRun("skipped", note="--skip-linearmodels"), ""
    else:
        handling, reason = choose_fe_handling(design, args.linearmodels_fe, args.dummies_max_rows)
        lm = time_linearmodels(design, handling)
    coef, se = float(tsls.params[0]), float(np.sqrt(tsls.cov[0, 0]))
    return SizeResult(
        n=n,
        raw_bytes=raw_bytes,
        raw_columns=raw_cols,
        engine_times=times,
        steps=steps,
        callees=callees,
        peak_bytes=peak,
        peak_steps=peak_steps,
        lm=lm,
        fe_reason=reason,
        coef_rel_diff=abs(coef - lm.coef) / abs(lm.coef),
        se_rel_diff=abs(se - lm.std_error) / abs(lm.std_error),
        extra={"coef": coef, "std_error": se},
    )


def fmt_n(n: int) -> str:
    exp = len(str(n)) - 1
    return f"10^{exp}" if 10**exp == n else f"{n:,}"


def summary_table(results: list[SizeResult], markdown: bool) -> str:
    header = [
        "n",
        "engine s (median)",
        "engine s (range)",
        "linearmodels s",
        "FE in linearmodels",
        "demeaning s",
        "speed ratio",
        "peak extra MiB",
        "raw data MiB",
        "memory ratio",
    ]
    rows = []
    for r in results:
        rows.append(
            [
                fmt_n(r.n),
                f"{r.engine_median:.3f}",
                f"{min(r.engine_times):.3f}-{max(r.engine_times):.3f}",
                f"{r.lm.seconds:.2f}",
                r.lm.fe_handling,
                "-" if np.isnan(r.lm.prep_seconds) else f"{r.lm.prep_seconds:.2f}",
                f"{r.speed_ratio:.1f}x",
                f"{r.peak_bytes / 2**20:.0f}",
                f"{r.raw_bytes / 2**20:.0f}",
                f"{r.memory_ratio:.2f}",
            ]
        )
    return _render(header, rows, markdown)


def steps_table(results: list[SizeResult], markdown: bool) -> str:
    names = list(results[0].steps)
    header = [
        "step",
        *[f"{fmt_n(r.n)} s" for r in results],
        *[f"{fmt_n(r.n)} peak MiB" for r in results],
    ]
    rows = []
    for name in names:
        rows.append(
            [
                name,
                *[f"{r.steps[name]:.3f}" for r in results],
                *[f"{r.peak_steps[name] / 2**20:.0f}" for r in results],
            ]
        )
    rows.append(
        ["sum of steps", *[f"{sum(r.steps.values()):.3f}" for r in results], *["" for _ in results]]
    )
    rows.append(
        [
            "whole estimate() minus the steps (not replayed, noise)",
            *[f"{r.engine_median - sum(r.steps.values()):.3f}" for r in results],
            *["" for _ in results],
        ]
    )
    rows.append(
        [
            "whole estimate() (median)",
            *[f"{r.engine_median:.3f}" for r in results],
            *["" for _ in results],
        ]
    )
    return _render(header, rows, markdown)


def callees_table(results: list[SizeResult], markdown: bool) -> str:
    names: list[str] = []
    for r in results:
        names += [k for k in r.callees if k not in names]
    total = "whole estimate() (profiled)"
    names.remove(total)
    big = results[-1].callees
    shown = [k for k in names if max(r.callees.get(k, 0.0) for r in results) >= SHOW_SECONDS]
    shown.sort(key=lambda k: -big.get(k, 0.0))
    rest = [k for k in names if k not in shown]
    header = ["called by estimate()", *[f"{fmt_n(r.n)} s" for r in results]]
    rows = [[k, *[f"{r.callees.get(k, 0.0):.3f}" for r in results]] for k in shown]
    if rest:
        label = f"{len(rest)} others, each under {SHOW_SECONDS} s"
        rows.append([label, *[f"{sum(r.callees.get(k, 0.0) for k in rest):.3f}" for r in results]])
    rows.append([total, *[f"{r.callees[total]:.3f}" for r in results]])
    return _render(header, rows, markdown)


def _render(header: list[str], rows: list[list[str]], markdown: bool) -> str:
    if markdown:
        lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
        lines += ["| " + " | ".join(row) + " |" for row in rows]
        return "\n".join(lines)
    widths = [max(len(h), *(len(row[i]) for row in rows)) for i, h in enumerate(header)]
    first = 0

    def line(cells: list[str]) -> str:
        return "  ".join(
            c.ljust(w) if i == first else c.rjust(w)
            for i, (c, w) in enumerate(zip(cells, widths, strict=True))
        )

    out = [line(header), "  ".join("-" * w for w in widths)]
    out += [line(row) for row in rows]
    return "\n".join(out)


def verdicts(results: list[SizeResult]) -> list[str]:
    out = []
    for r in results:
        mem = "meets" if r.memory_ratio <= MEMORY_TARGET else "MISSES"
        out.append(
            f"n = {fmt_n(r.n)}: memory {r.memory_ratio:.2f}x raw data {mem} the "
            f"<= {MEMORY_TARGET:.0f}x target"
        )
        if r.n == 10**6 and r.lm.fe_handling != "skipped":
            speed = "meets" if r.speed_ratio > 1 else "MISSES"
            out.append(
                f"n = 10^6: engine {r.engine_median:.2f} s vs linearmodels {r.lm.seconds:.2f} s "
                f"({r.speed_ratio:.1f}x) {speed} the 'faster than one linearmodels fit' target"
            )
    return out


# -------------------------------------------------------------------------- suite
SUITE_N = 1_000_000
SUITE_TARGET = 3.0  # whole suite / the engine's main clustered 2SLS fit (project target)
TOP_FUNCTIONS = 15  # rows of the "most own time" profile


def main_fit(design: Design) -> tuple[Moments, CovarianceSpec, EstimateArrays]:
    """The engine's own main fit: moments, cluster index and clustered 2SLS, nothing else."""
    m = compute_moments(design)
    cov = CovarianceSpec.build("cluster", design.clusters)
    return m, cov, tsls(m, cov)


def _timed(fn: Callable[[], object]) -> tuple[float, float, object]:
    """(wall s, this process's CPU s, result) of one call, after a garbage collection."""
    gc.collect()
    c0, t0 = time.process_time(), time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, time.process_time() - c0, out


SUITE_PARTS = (
    "main fit: compute_moments + cluster index + tsls",
    "whole estimate()",
    "instrument_strength alone",
    "weak_iv_inference alone",
    "linearmodels IV2SLS, clustered",
)


@dataclass
class SuiteResult:
    n: int
    fe_levels: int
    n_clusters: int
    wall: dict[str, list[float]]
    cpu: dict[str, list[float]]
    demeaning: list[float]
    lm_fe_handling: str
    coef_rel_diff: float
    se_rel_diff: float
    callees: dict[str, float]
    top: list[tuple[str, int, float, float]]
    load_before: tuple[float, float, float]
    load_after: tuple[float, float, float]
    cold: tuple[float, float]  # first main fit and first estimate() at this size, wall s

    def median(self, part: str, cpu: bool = False) -> float:
        values = (self.cpu if cpu else self.wall)[part]
        return statistics.median(values) if values else float("nan")

    def round_ratios(self, num: str, den: str) -> list[float]:
        """num / den within each round (the two ran seconds apart, at a similar load)."""
        return [a / b for a, b in zip(self.wall[num], self.wall[den], strict=True)]


def bench_suite(args: argparse.Namespace) -> SuiteResult:
    """Interleaved rounds: main fit, whole estimate(), the two checks alone, linearmodels."""
    design = make_design(args.suite_n, args.seed, fe_levels=args.suite_fe_levels)
    n_clusters = int(np.unique(design.clusters[:, 0]).size)
    parts = SUITE_PARTS if not args.skip_linearmodels else SUITE_PARTS[:-1]
    wall: dict[str, list[float]] = {k: [] for k in parts}
    cpu: dict[str, list[float]] = {k: [] for k in parts}
    demeaning: list[float] = []
    handling = "skipped"
    coef_diff = se_diff = float("nan")
    load_before = os.getloadavg()
    # the first calls at this size are slower (fresh memory pages for the n-row arrays):
    # timed and shown apart, kept out of the rounds so that every round is alike
    cold_main = _timed(partial(main_fit, design))[0]
    cold_whole = _timed(partial(run_estimate, design))[0]
    print(
        f"  first calls at this size, not in the rounds: main fit {cold_main:.2f} s, "
        f"whole estimate() {cold_whole:.2f} s",
        flush=True,
    )
    for r in range(max(args.repeats, 1)):
        t_round = time.perf_counter()
        secs, cpus, out = _timed(partial(main_fit, design))
        m, cov, fit = out  # type: ignore[misc]
        wall[parts[0]].append(secs)
        cpu[parts[0]].append(cpus)
        secs, cpus, _ = _timed(partial(run_estimate, design))
        wall[parts[1]].append(secs)
        cpu[parts[1]].append(cpus)
        label = cov.describe(design.cluster_names)
        secs, cpus, _ = _timed(partial(instrument_strength, m, cov, label, design.endog_names, {}))
        wall[parts[2]].append(secs)
        cpu[parts[2]].append(cpus)
        # the first-stage F that estimate() hands to the weak-IV step (not timed here)
        f_main = fit_on_instruments(m, m.x[:, 0], cov).wald / m.q
        secs, cpus, _ = _timed(
            partial(weak_iv_inference, m, cov, label, design.endog_names, {}, 0.95, fit, f_main)
        )
        wall[parts[3]].append(secs)
        cpu[parts[3]].append(cpus)
        coef, se = float(fit.params[0]), float(np.sqrt(fit.cov[0, 0]))
        del m, cov, out
        if not args.skip_linearmodels:
            handling = "none" if args.suite_fe_levels == 0 else "demeaned"
            lm = time_linearmodels(design, handling)
            wall[parts[4]].append(lm.seconds)
            cpu[parts[4]].append(lm.cpu_seconds)
            if not np.isnan(lm.prep_seconds):
                demeaning.append(lm.prep_seconds)
            coef_diff = abs(coef - lm.coef) / abs(lm.coef)
            se_diff = abs(se - lm.std_error) / abs(lm.std_error)
        print(
            f"  round {r + 1}: "
            + ", ".join(f"{k.split(':')[0]} {wall[k][-1]:.2f} s" for k in parts)
            + f" (round took {time.perf_counter() - t_round:.0f} s; load "
            f"{os.getloadavg()[0]:.2f})",
            flush=True,
        )
    table = profile_table(design)
    return SuiteResult(
        n=design.n,
        fe_levels=args.suite_fe_levels,
        n_clusters=n_clusters,
        wall=wall,
        cpu=cpu,
        demeaning=demeaning,
        lm_fe_handling=handling,
        coef_rel_diff=coef_diff,
        se_rel_diff=se_diff,
        callees=callees_of_estimate(table),
        top=top_functions(table, TOP_FUNCTIONS),
        load_before=load_before,
        load_after=os.getloadavg(),
        cold=(cold_main, cold_whole),
    )


def suite_table(res: SuiteResult, markdown: bool) -> str:
    main = SUITE_PARTS[0]
    header = [
        "part",
        "wall s (median)",
        "wall s (range)",
        "CPU s (median)",
        "x main fit (wall)",
        "x main fit (CPU)",
    ]
    rows = []
    for part in res.wall:
        w = res.wall[part]
        rows.append(
            [
                part,
                f"{res.median(part):.3f}",
                f"{min(w):.3f}-{max(w):.3f}",
                f"{res.median(part, cpu=True):.3f}",
                f"{res.median(part) / res.median(main):.2f}",
                f"{res.median(part, cpu=True) / res.median(main, cpu=True):.2f}",
            ]
        )
    return _render(header, rows, markdown)


def suite_profile_tables(res: SuiteResult, markdown: bool) -> str:
    total = "whole estimate() (profiled)"
    names = sorted((k for k in res.callees if k != total), key=lambda k: -res.callees[k])
    shown = [k for k in names if res.callees[k] >= SHOW_SECONDS]
    rest = [k for k in names if k not in shown]
    rows = [[k, f"{res.callees[k]:.3f}"] for k in shown]
    if rest:
        rows.append(
            [
                f"{len(rest)} others, each under {SHOW_SECONDS} s",
                f"{sum(res.callees[k] for k in rest):.3f}",
            ]
        )
    rows.append([total, f"{res.callees[total]:.3f}"])
    callees = _render(["called by estimate()", "s"], rows, markdown)
    top = _render(
        ["function (file.name:line)", "calls", "own s", "cumulative s"],
        [[name, f"{calls:,}", f"{own:.3f}", f"{cum:.3f}"] for name, calls, own, cum in res.top],
        markdown,
    )
    return f"{callees}\n\nfunctions with the most own time in that call:\n\n{top}"


def suite_verdicts(res: SuiteResult) -> list[str]:
    main, whole = SUITE_PARTS[0], SUITE_PARTS[1]
    ratio = res.median(whole) / res.median(main)
    per_round = res.round_ratios(whole, main)
    ok = "meets" if ratio <= SUITE_TARGET else "MISSES"
    out = [
        f"whole estimate() {res.median(whole):.2f} s = {ratio:.2f}x the main clustered 2SLS fit "
        f"({res.median(main):.2f} s; per round {min(per_round):.2f}-{max(per_round):.2f}x; "
        f"CPU time {res.median(whole, True) / res.median(main, True):.2f}x): {ok} the "
        f"<= {SUITE_TARGET:.0f}x target"
    ]
    lm = SUITE_PARTS[4]
    if lm in res.wall:
        speed = res.median(lm) / res.median(whole)
        per_round = res.round_ratios(lm, whole)
        ok = "meets" if speed > 1 else "MISSES"
        out.append(
            f"linearmodels {res.median(lm):.2f} s / whole estimate() {res.median(whole):.2f} s "
            f"= {speed:.2f}x (per round {min(per_round):.2f}-{max(per_round):.2f}x; CPU time "
            f"{res.median(lm, True) / res.median(whole, True):.2f}x): {ok} the 'faster than one "
            "linearmodels clustered IV2SLS fit' target"
        )
    return out


# --------------------------------------------------------------------------- demo
STAGE_LINE = re.compile(r"^\s+(?P<name>\S.*?)\s+(?P<secs>\d+\.\d+) s$")


@dataclass
class DemoRun:
    wall: float
    stages: dict[str, float]  # as `--timings` prints them, "total" included


def run_demo_once(timeout: float) -> DemoRun:
    """Wall time of `python -m reportkit demo DIR --timings` in a fresh folder under the
    system's temporary directory, and the stage times it prints."""
    repo = Path(__file__).resolve().parents[1]
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(repo), env.get("PYTHONPATH")) if p)
    parent = Path(tempfile.mkdtemp(prefix="reportkit-bench-demo-"))
    command = [sys.executable, "-m", "reportkit", "demo", str(parent / "bundle"), "--timings"]
    try:
        t0 = time.perf_counter()
        proc = subprocess.run(
            command, cwd=repo, env=env, capture_output=True, text=True, timeout=timeout
        )
        wall = time.perf_counter() - t0
    finally:
        shutil.rmtree(parent, ignore_errors=True)
    if proc.returncode != 0:
        raise SystemExit(
            f"`{' '.join(command[1:])}` exited with {proc.returncode}:\n{proc.stderr[-3000:]}"
        )
    stages: dict[str, float] = {}
    lines = (proc.stderr + proc.stdout).splitlines()
    if "time per stage:" in lines:
        for line in lines[lines.index("time per stage:") + 1 :]:
            hit = STAGE_LINE.match(line)
            if not hit:
                break
            stages[hit["name"]] = float(hit["secs"])
    if "total" not in stages:
        raise SystemExit("could not read the stage times printed by --timings:\n" + proc.stderr)
    return DemoRun(wall=wall, stages=stages)


def demo_table(runs: list[DemoRun], markdown: bool) -> str:
    names = list(runs[0].stages)
    header = ["stage", *[f"run {i + 1} s" for i in range(len(runs))], "median s"]
    rows = [
        [
            name,
            *[f"{r.stages.get(name, float('nan')):.2f}" for r in runs],
            f"{statistics.median(r.stages.get(name, float('nan')) for r in runs):.2f}",
        ]
        for name in names
    ]
    start_up = [r.wall - r.stages["total"] for r in runs]
    rows.append(
        [
            "start-up and the rest (wall - total)",
            *[f"{v:.2f}" for v in start_up],
            f"{statistics.median(start_up):.2f}",
        ]
    )
    rows.append(
        [
            "wall time of the command",
            *[f"{r.wall:.2f}" for r in runs],
            f"{statistics.median(r.wall for r in runs):.2f}",
        ]
    )
    return _render(header, rows, markdown)


def code_version() -> str:
    """The checkout's commit (read-only git call); the working tree may differ from it."""
    try:
        out = subprocess.run(
            ["git", "rev-parse", "--short", "HEAD"],
            cwd=Path(__file__).resolve().parents[1],
            capture_output=True,
            text=True,
            timeout=10,
            check=True,
        )
    except (OSError, subprocess.SubprocessError):
        return "unknown"
    return out.stdout.strip() + " (plus any uncommitted changes)"


def machine_info() -> dict[str, object]:
    return {
        "reportkit commit": code_version(),
        "python": platform.python_version(),
        "platform": platform.platform(),
        "cpus": os.cpu_count(),
        "load average (1, 5, 15 min)": [round(v, 2) for v in os.getloadavg()],
        "numpy": np.__version__,
        "blas before limiting (threadpoolctl.threadpool_info)": [
            {k: v for k, v in info.items() if k != "filepath"} for info in threadpool_info()
        ],
    }


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument(
        "--sizes",
        type=int,
        nargs="+",
        default=[10_000, 100_000, 1_000_000],
        help=f"sample sizes, each at least {2 * FE_LEVELS:,}",
    )
    ap.add_argument("--seed", type=int, default=20_240, help="seed of the synthetic data")
    ap.add_argument("--repeats", type=int, default=3, help="timed estimate() calls per size")
    ap.add_argument(
        "--linearmodels-fe",
        choices=["auto", "dummies", "demeaned"],
        default="auto",
        help="how linearmodels gets the fixed effect (auto: dummies when they fit in memory "
        "and n is small; forcing dummies at large n can exhaust the memory)",
    )
    ap.add_argument(
        "--dummies-max-rows",
        type=int,
        default=DUMMIES_MAX_ROWS,
        help="with --linearmodels-fe auto, demean above this many rows even if dummies fit",
    )
    ap.add_argument("--skip-linearmodels", action="store_true")
    ap.add_argument("--markdown", action="store_true", help="print the tables in Markdown")
    ap.add_argument("--json", type=Path, help="also write every figure to this JSON file")
    ap.add_argument(
        "--suite",
        action="store_true",
        help="time the whole diagnostics suite against the main clustered 2SLS fit and one "
        "linearmodels fit (instead of the --sizes benchmark)",
    )
    ap.add_argument("--suite-n", type=int, default=SUITE_N, help="rows for --suite")
    ap.add_argument(
        "--suite-fe-levels",
        type=int,
        default=FE_LEVELS,
        help=f"fixed-effect levels for --suite (default {FE_LEVELS:,}; 0 = no fixed effect)",
    )
    ap.add_argument(
        "--demo",
        action="store_true",
        help="time `python -m reportkit demo DIR --timings` end to end in subprocesses "
        "(instead of the --sizes benchmark)",
    )
    ap.add_argument("--demo-runs", type=int, default=3, help="demo runs (median reported)")
    return ap.parse_args(argv)


def print_end_state() -> None:
    load = ", ".join(f"{v:.2f}" for v in os.getloadavg())
    print(f"load average at the end (1, 5, 15 min): {load} on {os.cpu_count()} CPUs")
    try:
        import resource

        max_rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20  # KiB on Linux
        print(f"largest resident memory of this process: {max_rss:.1f} GiB")
    except ImportError:  # not on Windows
        pass


def main_suite(args: argparse.Namespace) -> dict[str, object]:
    fe = (
        f"one fixed effect with {args.suite_fe_levels:,} levels (absorbed by the engine, "
        "demeaned beforehand for linearmodels)"
        if args.suite_fe_levels
        else "no fixed effect (a constant)"
    )
    print(
        f"\nsuite: n = {args.suite_n:,}, 1 endogenous, {N_INSTRUMENTS} instruments, "
        f"{N_CONTROLS} controls, {fe}, n/{ROWS_PER_CLUSTER} clusters; seed {args.seed}; "
        f"{args.repeats} interleaved rounds; BLAS 1 thread"
    )
    with threadpool_limits(limits=1):
        warm_up(args.seed, not args.skip_linearmodels)
        res = bench_suite(args)
    print(
        f"\n{res.n_clusters:,} clusters; load average before {res.load_before[0]:.2f}, after "
        f"{res.load_after[0]:.2f} (1 min) on {os.cpu_count()} CPUs\n"
    )
    print(suite_table(res, args.markdown))
    if res.demeaning:
        print(
            f"\nlinearmodels got columns demeaned within the fixed effect beforehand (pandas, "
            f"{statistics.median(res.demeaning):.2f} s median, not counted above); 2SLS "
            f"agreement with the engine: coefficient {res.coef_rel_diff:.1e}, std. error "
            f"{res.se_rel_diff:.1e} relative"
        )
    elif res.lm_fe_handling == "none":
        print(
            f"\n2SLS agreement with linearmodels: coefficient {res.coef_rel_diff:.1e}, "
            f"std. error {res.se_rel_diff:.1e} relative"
        )
    print("\nwhere one estimate() call spends its time (cProfile, after the timed rounds):\n")
    print(suite_profile_tables(res, args.markdown))
    print()
    for v in suite_verdicts(res):
        print(v)
    return {
        "n": res.n,
        "fe_levels": res.fe_levels,
        "clusters": res.n_clusters,
        "wall_seconds": res.wall,
        "cpu_seconds": res.cpu,
        "linearmodels_demeaning_seconds": res.demeaning,
        "linearmodels_fe_handling": res.lm_fe_handling,
        "coef_rel_diff": res.coef_rel_diff,
        "se_rel_diff": res.se_rel_diff,
        "estimate_callees_seconds": res.callees,
        "top_functions": res.top,
        "load_before": res.load_before,
        "load_after": res.load_after,
        "first_calls_wall_seconds": {"main fit": res.cold[0], "whole estimate()": res.cold[1]},
    }


def main_demo(args: argparse.Namespace) -> dict[str, object]:
    print(
        f"\ndemo: `python -m reportkit demo DIR --timings`, {args.demo_runs} runs, each in a "
        "fresh temporary folder, one after the other (BLAS not limited: as a user runs it)"
    )
    runs = []
    for i in range(max(args.demo_runs, 1)):
        runs.append(run_demo_once(timeout=600))
        print(
            f"  run {i + 1}: {runs[-1].wall:.2f} s wall, stages {runs[-1].stages['total']:.2f} s "
            f"(load {os.getloadavg()[0]:.2f})",
            flush=True,
        )
    print()
    print(demo_table(runs, args.markdown))
    return {"runs": [r.__dict__ for r in runs]}


def main(argv: list[str] | None = None) -> int:
    args = parse_args(argv)
    if min(args.sizes) < 2 * FE_LEVELS:
        raise SystemExit(f"--sizes: each size must be at least {2 * FE_LEVELS:,}")
    if args.suite and args.suite_n < max(2 * args.suite_fe_levels, 2 * ROWS_PER_CLUSTER):
        raise SystemExit("--suite-n: too few rows for the fixed effect and the clusters")
    import pandas as pd
    import scipy

    lm_version = "skipped"
    if not args.skip_linearmodels:
        import linearmodels

        lm_version = linearmodels.__version__
    info = machine_info()
    info.update({"scipy": scipy.__version__, "pandas": pd.__version__, "linearmodels": lm_version})
    print("machine and libraries:")
    print(json.dumps(info, indent=2))
    payload: dict[str, object] = {"machine": info, "seed": args.seed}
    if args.suite or args.demo:
        if args.suite:
            payload["suite"] = main_suite(args)
        if args.demo:
            payload["demo"] = main_demo(args)
        print_end_state()
        if args.json:
            args.json.write_text(json.dumps(payload, indent=2, default=float) + "\n")
        return 0
    print(
        f"\ndata: 1 endogenous, {N_INSTRUMENTS} instruments, {N_CONTROLS} controls, one fixed "
        f"effect with {FE_LEVELS:,} levels, n/{ROWS_PER_CLUSTER} clusters; seed {args.seed}"
    )
    print("estimate(): cluster covariance, estimators " + ", ".join(ESTIMATORS) + ", BLAS 1 thread")
    results = []
    with threadpool_limits(limits=1):
        threads = [info["num_threads"] for info in threadpool_info()]
        print(f"BLAS threads during the timings: {threads}")
        warm_up(args.seed, not args.skip_linearmodels)
        for n in args.sizes:
            t0 = time.perf_counter()
            r = bench_one(n, args)
            results.append(r)
            lm_txt = (
                "linearmodels skipped"
                if r.lm.fe_handling == "skipped"
                else f"linearmodels {r.lm.seconds:.2f} s with the fixed effect {r.lm.fe_handling}"
                f" ({r.fe_reason}); 2SLS agreement: coefficient {r.coef_rel_diff:.1e}, "
                f"std. error {r.se_rel_diff:.1e} relative"
            )
            print(
                f"\nn = {n:,}: estimate() {r.engine_median:.3f} s median of "
                f"{len(r.engine_times)}; {lm_txt}; benchmark of this size took "
                f"{time.perf_counter() - t0:.0f} s",
                flush=True,
            )
    print("\nsummary (speed ratio = linearmodels s / engine median s; memory ratio = peak extra")
    print(
        f"memory of estimate() / raw numeric data, {results[0].raw_columns} columns x 8 bytes):\n"
    )
    print(summary_table(results, args.markdown))
    print("\nsteps of estimate(), replayed one by one (peak = traced memory at the step's peak):\n")
    print(steps_table(results, args.markdown))
    print("\nwhere one estimate() call spends its time, by the functions it calls directly")
    print("(cProfile; follows estimate() as it is, including work the replay above leaves out):\n")
    print(callees_table(results, args.markdown))
    print()
    for v in verdicts(results):
        print(v)
    print_end_state()
    if args.json:
        payload |= {
            "results": [
                {
                    "n": r.n,
                    "engine_seconds": r.engine_times,
                    "steps_seconds": r.steps,
                    "estimate_callees_seconds": r.callees,
                    "peak_bytes": r.peak_bytes,
                    "peak_bytes_steps": r.peak_steps,
                    "raw_bytes": r.raw_bytes,
                    "raw_columns": r.raw_columns,
                    "linearmodels": r.lm.__dict__,
                    "linearmodels_fe_reason": r.fe_reason,
                    "coef_rel_diff": r.coef_rel_diff,
                    "se_rel_diff": r.se_rel_diff,
                }
                for r in results
            ],
        }
        args.json.write_text(json.dumps(payload, indent=2, default=float) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
