"""Speed and memory of the control-function probit with its batched bootstrap.

On seeded synthetic data (one continuous endogenous regressor d, two instruments, a constant
and ``--controls`` controls, ``--clusters`` clusters of equal size, a 0/1 outcome from a
latent index whose error shares the first-stage error) this measures, at each n:

- the wall time of ``control_function_probit`` with ``--draws`` bootstrap draws (clusters
  resampled), and, replayed apart, its two parts: the full-sample fit (first stage, probit,
  average partial effect, analytic two-step covariance) and the bootstrap of both stages;
- the peak memory it allocates (tracemalloc traces numpy's buffers), also as a multiple of
  the raw numeric data (n x columns x 8 bytes);
- the wall time of the engine's main clustered 2SLS fit on the same data
  (``compute_moments`` + cluster index + ``estimators.tsls``, as ``bench_engine.py --suite``);
- the wall time of ONE statsmodels ``Probit`` fit of the second stage, times 2 x draws: what a
  bootstrap that refits both stages draw by draw with a library would cost at least
  (the least-squares first stage is cheaper than a probit, so this over-states it a little).

BLAS is held to one thread (threadpoolctl), as the pipeline does. Data generation is not
timed. Run from the repository root:

    python benchmarks/bench_binary_bootstrap.py --sizes 100000 1000000
"""

from __future__ import annotations

import argparse
import gc
import os
import statistics
import sys
import time
import tracemalloc
from collections.abc import Callable
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

# benchmark the checkout this file lives in, not an installed copy
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.design import Design
from reportkit.engine.estimators import tsls
from reportkit.engine.moments import compute_moments
from reportkit.variants.binary_core import BootstrapPlan
from reportkit.variants.binary_models import (
    bootstrap_two_step,
    control_function_probit,
    fit_two_step,
    prepare_inputs,
    two_step_covariance,
)


def make_data(n: int, controls: int, clusters: int, seed: int) -> dict[str, np.ndarray]:
    """y = 1{0.5 d + w g + u > 0}, d = z pi + w a + v, u = 0.6 v + e (invented design)."""
    rng = np.random.default_rng([seed, n])
    x = rng.normal(size=(n, controls))
    w = np.column_stack([np.ones(n), x])
    z = rng.normal(size=(n, 2)) + 0.3 * x[:, :1]
    cl = rng.permutation(np.arange(n) % clusters)
    v = rng.normal(size=n) + 0.3 * rng.normal(size=clusters)[cl]
    d = z @ np.array([0.5, 0.3]) + x @ np.linspace(-0.3, 0.3, controls) + v
    u = 0.6 * v + 0.8 * rng.normal(size=n)
    y = (0.5 * d + x @ np.linspace(0.2, -0.2, controls) + u > 0).astype(float)
    return {"y": y, "d": d, "z": z, "w": w, "x": x, "clusters": cl}


def design_of(data: dict[str, np.ndarray]) -> Design:
    """The same data as the engine's Design (controls without the constant)."""
    k = data["x"].shape[1]
    return Design(
        y=data["y"],
        endog=data["d"][:, None],
        instruments=data["z"],
        controls=data["x"],
        fixed_effects=np.zeros((data["y"].size, 0), np.int64),
        clusters=data["clusters"][:, None].astype(np.int64),
        weights=None,
        outcome_name="y",
        endog_names=("d",),
        instrument_names=("z0", "z1"),
        control_names=tuple(f"c{j}" for j in range(k)),
    )


def timed(fn: Callable[[], object]) -> float:
    gc.collect()
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def peak_bytes(fn: Callable[[], object]) -> int:
    gc.collect()
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def bench(n: int, args: argparse.Namespace) -> dict[str, float]:
    data = make_data(n, args.controls, args.clusters, args.seed)
    y, d, z, w, cl = data["y"], data["d"], data["z"], data["w"], data["clusters"]
    raw = sum(a.nbytes for a in (y, d, z, w)) + cl.nbytes
    design = design_of(data)

    def whole() -> object:
        return control_function_probit(
            y, d, z, w, weights=None, clusters=cl, draws=args.draws, seed=args.seed, level=0.95
        )

    inp = prepare_inputs(y, d, z, w, None, cl, None)
    fit = fit_two_step(inp, "linear", "probit")

    def full_sample() -> object:
        f = fit_two_step(inp, "linear", "probit")
        return two_step_covariance(inp, f, "probit")

    def bootstrap() -> object:
        plan = BootstrapPlan(n, args.draws, args.seed, inp.codes, None)
        return bootstrap_two_step(
            y,
            d,
            z,
            w,
            first_stage="linear",
            link="probit",
            plan=plan,
            first_start=fit.first,
            second_start=fit.second.params,
        )

    def engine_main_fit() -> object:
        m = compute_moments(design)
        cov = CovarianceSpec.build("cluster", design.clusters)
        return tsls(m, cov)

    out: dict[str, float] = {"n": n, "raw_mb": raw / 2**20}
    rounds: dict[str, list[float]] = {"cf": [], "full": [], "boot": [], "tsls": []}
    for _ in range(args.repeats):
        rounds["cf"].append(timed(whole))
        rounds["full"].append(timed(full_sample))
        rounds["boot"].append(timed(bootstrap))
        rounds["tsls"].append(timed(engine_main_fit))
    for key, values in rounds.items():
        out[key] = statistics.median(values)
    out["peak_mb"] = peak_bytes(whole) / 2**20
    out["tsls_peak_mb"] = peak_bytes(engine_main_fit) / 2**20
    effect = whole()
    out["estimate"] = effect.estimate  # type: ignore[attr-defined]
    out["std_error"] = effect.std_error  # type: ignore[attr-defined]
    out["failed"] = effect.extra["draws_failed"]  # type: ignore[attr-defined]
    if not args.skip_statsmodels:
        import statsmodels.api as sm

        x2 = fit.x_second
        out["sm_probit"] = timed(lambda: sm.Probit(y, x2).fit(disp=0))
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[100_000, 1_000_000])
    parser.add_argument("--draws", type=int, default=199)
    parser.add_argument("--controls", type=int, default=4)
    parser.add_argument("--clusters", type=int, default=50)
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--seed", type=int, default=20240)
    parser.add_argument("--skip-statsmodels", action="store_true")
    args = parser.parse_args()
    print(
        f"control-function probit, {args.draws} bootstrap draws (clusters resampled), "
        f"{args.controls} controls + constant, 1 continuous d, 2 instruments, "
        f"{args.clusters} clusters; seed {args.seed}; BLAS 1 thread; "
        f"{os.cpu_count()} CPUs, load {os.getloadavg()[0]:.2f}"
    )
    header = (
        "| n | CF probit + bootstrap s | full-sample fit s | bootstrap s | engine 2SLS s "
        "| ratio | peak MiB (x raw) | 2SLS peak MiB | statsmodels refit loop s (est.) |"
    )
    print(header)
    print("|" + "---|" * 9)
    with threadpool_limits(limits=1):
        for n in args.sizes:
            r = bench(n, args)
            loop = 2 * args.draws * r["sm_probit"] if "sm_probit" in r else float("nan")
            print(
                f"| {n:,} | {r['cf']:.2f} | {r['full']:.2f} | {r['boot']:.2f} | "
                f"{r['tsls']:.2f} | {r['cf'] / r['tsls']:.0f}x | "
                f"{r['peak_mb']:.0f} ({r['peak_mb'] / r['raw_mb']:.1f}x) | "
                f"{r['tsls_peak_mb']:.0f} | {loop:.0f} |",
                flush=True,
            )
            print(
                f"  APE {r['estimate']:.5f} (bootstrap SE {r['std_error']:.5f}), "
                f"{r['failed']:.0f} draws failed; one statsmodels Probit fit "
                f"{r.get('sm_probit', float('nan')):.2f} s; load {os.getloadavg()[0]:.2f}",
                flush=True,
            )


if __name__ == "__main__":
    main()
