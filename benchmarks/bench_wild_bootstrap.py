"""Speed and memory of the wild bootstrap of the 2SLS t test, against the engine's main fit.

Data: ``bench_engine.make_design`` (the engine benchmark's seeded synthetic IV data), cut
down to a typical wild-bootstrap setting: 1 endogenous regressor, 2 instruments (its first
two), 4 controls (its first four), its fixed effect with 1,000 levels, and 50 clusters (its
clusters of 20 rows merged by code modulo 50, so each has n / 50 rows). The null tested is
the generator's true slope, beta = 1.5, so the printed p-values are draws from a true null.

At each sample size (default 20,000, 10^5 and 10^6), with BLAS held to one thread (as the
pipeline does), in interleaved rounds (default 3) after one untimed warm-up call of each part:

- main fit: the engine's main clustered 2SLS fit, ``compute_moments(design)`` +
  ``CovarianceSpec.build("cluster", clusters)`` + ``estimators.tsls`` (as
  ``bench_engine.py --suite`` times it);
- ``wild_bootstrap_tsls`` with 999 draws at cluster level and at observation level (HC1),
  each with Rademacher and with Webb draws, on the main fit's moments (the moments are
  the main fit's work and are not counted again), given the design's fixed-effect codes
  as the pipeline passes them. Every bootstrap sample is re-partialled on the controls and
  the fixed effect: at cluster level by the "one effect" path (one fixed-effect dimension:
  the coupling arrays A and C of the 50 clusters x 2 instruments in closed form, from
  per-(cluster, level) sums); at observation level exactly up to the module's
  ``EXACT_ROWS_LIMIT`` rows (20,000; "per draw", one absorption pass per draw) and by the
  documented partialled-space approximation above it. The path each part took is printed;
- the set-up of the coupling arrays alone, timed once per round: in closed form
  (``_OneEffectScores``) and, with ``--absorbed``, by absorbing the 100 masked instrument
  columns through pyhdfe (``_CoupledScores``, the general path that two or more fixed
  effects take).

Printed: median wall seconds (and range), median CPU seconds of this process, the ratio of
each median to the main fit's, the peak memory each part allocates (tracemalloc traces
numpy's buffers; one extra call each, untimed) and the t statistics and p-values. Targets
(the project's): cluster level within 5x the main fit, observation level within 30x.

Run from the repository root:  python benchmarks/bench_wild_bootstrap.py
(``--sizes 20000 100000 1000000 --draws 999 --rounds 3 [--absorbed]``)
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import statistics
import sys
import time
import tracemalloc
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path

from threadpoolctl import threadpool_limits

# benchmark the checkout this file lives in, not an installed copy
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_engine import machine_info, make_design

from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.design import Design
from reportkit.engine.estimators import tsls
from reportkit.engine.moments import Moments, compute_moments
from reportkit.variants import wild_bootstrap as wb
from reportkit.variants.wild_bootstrap import WildBootstrapArrays, wild_bootstrap_tsls

N_INSTRUMENTS = 2
N_CONTROLS = 4
N_CLUSTERS = 50
TRUE_BETA = 1.5  # the slope in bench_engine.make_design
TARGETS = {"cluster": 5.0, "observation": 30.0}
MAIN = "main fit: compute_moments + cluster index + tsls"
COUPLING = "of which: coupling arrays (one effect, closed form)"
ABSORBED = "for comparison: coupling arrays (masked columns absorbed)"
PARTS = [
    ("cluster", "rademacher"),
    ("cluster", "webb"),
    ("observation", "rademacher"),
    ("observation", "webb"),
]


def part_name(level: str, weights: str) -> str:
    return f"wild bootstrap, {level} level, {weights}"


def path_taken(m: Moments, design: Design, level: str, draws: int) -> str:
    """The module's choice of algorithm for this part (see its docstring)."""
    codes = design.clusters[:, 0] if level == "cluster" else None
    index = None if codes is None else wb._cluster_index(codes, m.n)
    one_effect = design.fixed_effects.shape[1] == 1
    return wb._choose_path(m, index, draws, one_effect)


def coupling_only(m: Moments, design: Design, absorbed: bool = False) -> object:
    """The coupling arrays' set-up alone: in closed form (one fixed effect), or with
    ``absorbed`` the G q masked instrument columns absorbed through pyhdfe."""
    index = wb._cluster_index(design.clusters[:, 0], m.n)
    fit = wb._restricted_fit(m, TRUE_BETA)
    sums = wb._unit_sums(m, fit, index)
    if absorbed:
        return wb._CoupledScores(m, fit, sums, index)
    effect = wb._one_effect(m, design.fixed_effects[:, 0])
    return wb._OneEffectScores(m, fit, sums, index, effect)


def bootstrap_design(n: int, seed: int) -> Design:
    """The engine benchmark's design with 2 instruments, 4 controls and 50 clusters."""
    d = make_design(n, seed)
    return replace(
        d,
        instruments=d.instruments[:, :N_INSTRUMENTS],
        instrument_names=d.instrument_names[:N_INSTRUMENTS],
        controls=d.controls[:, :N_CONTROLS],
        control_names=d.control_names[:N_CONTROLS],
        clusters=d.clusters % N_CLUSTERS,
    )


def main_fit(design: Design) -> Moments:
    m = compute_moments(design)
    tsls(m, CovarianceSpec.build("cluster", design.clusters))
    return m


def run_bootstrap(
    m: Moments, design: Design, level: str, weights: str, draws: int, seed: int
) -> WildBootstrapArrays:
    return wild_bootstrap_tsls(
        m,
        cluster_codes=design.clusters[:, 0] if level == "cluster" else None,
        k=1 + m.k_exog,
        draws=draws,
        weights=weights,
        seed=seed,
        beta0=TRUE_BETA,
        fixed_effects=design.fixed_effects,
    )


@dataclass
class SizeResult:
    n: int
    wall: dict[str, list[float]] = field(default_factory=dict)
    cpu: dict[str, list[float]] = field(default_factory=dict)
    peak: dict[str, int] = field(default_factory=dict)
    stats: dict[str, tuple[float, float]] = field(default_factory=dict)  # t, p
    paths: dict[str, str] = field(default_factory=dict)

    def median(self, name: str, cpu: bool = False) -> float:
        return statistics.median((self.cpu if cpu else self.wall)[name])


def timed(fn: Callable[[], object]) -> tuple[float, float, object]:
    gc.collect()
    c0, t0 = time.process_time(), time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, time.process_time() - c0, out


def peak_bytes(fn: Callable[[], object]) -> int:
    gc.collect()
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def bench_size(n: int, args: argparse.Namespace) -> SizeResult:
    design = bootstrap_design(n, args.seed)
    res = SizeResult(n=n)
    m = main_fit(design)  # warm-up, untimed
    for level, weights in PARTS:
        run_bootstrap(m, design, level, weights, args.draws, args.bootstrap_seed)
    for r in range(args.rounds):
        del m
        wall, cpu, out = timed(lambda: main_fit(design))
        m = out  # type: ignore[assignment]
        res.wall.setdefault(MAIN, []).append(wall)
        res.cpu.setdefault(MAIN, []).append(cpu)
        for level, weights in PARTS:
            name = part_name(level, weights)
            wall, cpu, boot = timed(
                lambda mm=m, lv=level, w=weights: run_bootstrap(
                    mm, design, lv, w, args.draws, args.bootstrap_seed
                )
            )
            res.wall.setdefault(name, []).append(wall)
            res.cpu.setdefault(name, []).append(cpu)
            res.stats[name] = (boot.t_statistic, boot.p_value)  # type: ignore[attr-defined]
            res.paths[name] = path_taken(m, design, level, args.draws)
        if any(p == "one effect" for p in res.paths.values()):
            wall, cpu, _ = timed(lambda mm=m: coupling_only(mm, design))
            res.wall.setdefault(COUPLING, []).append(wall)
            res.cpu.setdefault(COUPLING, []).append(cpu)
        if args.absorbed:
            wall, cpu, _ = timed(lambda mm=m: coupling_only(mm, design, absorbed=True))
            res.wall.setdefault(ABSORBED, []).append(wall)
            res.cpu.setdefault(ABSORBED, []).append(cpu)
        print(f"  n = {n:,}, round {r + 1} done (load {os.getloadavg()[0]:.2f})", flush=True)
    del m
    res.peak[MAIN] = peak_bytes(lambda: main_fit(design))
    m = main_fit(design)
    if COUPLING in res.wall:
        res.peak[COUPLING] = peak_bytes(lambda: coupling_only(m, design))
    if ABSORBED in res.wall:
        res.peak[ABSORBED] = peak_bytes(lambda: coupling_only(m, design, absorbed=True))
    for level, weights in PARTS:
        res.peak[part_name(level, weights)] = peak_bytes(
            lambda mm=m, lv=level, w=weights: run_bootstrap(
                mm, design, lv, w, args.draws, args.bootstrap_seed
            )
        )
    return res


def table(res: SizeResult) -> str:
    header = [
        "part",
        "path",
        "wall s (median)",
        "wall s (range)",
        "CPU s",
        "x main fit (wall)",
        "x main fit (CPU)",
        "peak MiB",
        "t",
        "p-value",
    ]
    main_wall, main_cpu = res.median(MAIN), res.median(MAIN, True)
    rows = []
    for name in res.wall:
        t, p = res.stats.get(name, (float("nan"), float("nan")))
        rows.append(
            [
                name,
                res.paths.get(name, ""),
                f"{res.median(name):.3f}",
                f"{min(res.wall[name]):.3f}-{max(res.wall[name]):.3f}",
                f"{res.median(name, True):.3f}",
                f"{res.median(name) / main_wall:.2f}",
                f"{res.median(name, True) / main_cpu:.2f}",
                f"{res.peak[name] / 2**20:.0f}",
                "" if name not in res.stats else f"{t:.3f}",
                "" if name not in res.stats else f"{p:.3f}",
            ]
        )
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]
    lines = ["  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True))]
    lines += ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)) for r in rows]
    return "\n".join(lines)


def verdicts(res: SizeResult) -> list[str]:
    out = []
    for level, weights in PARTS:
        name = part_name(level, weights)
        ratio = res.median(name) / res.median(MAIN)
        target = TARGETS[level]
        ok = "meets" if ratio <= target else "MISSES"
        cpu_ratio = res.median(name, True) / res.median(MAIN, True)
        out.append(
            f"n = {res.n:,}, {level} level, {weights} ({res.paths[name]}): {ratio:.2f}x the "
            f"main fit (wall; CPU {cpu_ratio:.2f}x): {ok} the <= {target:.0f}x target"
        )
    return out


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[20_000, 100_000, 1_000_000])
    ap.add_argument("--draws", type=int, default=999, help="bootstrap draws per call")
    ap.add_argument("--rounds", type=int, default=3, help="interleaved timed rounds")
    ap.add_argument("--seed", type=int, default=20_240, help="seed of the synthetic data")
    ap.add_argument("--bootstrap-seed", type=int, default=1, help="seed of the draws")
    ap.add_argument(
        "--absorbed",
        action="store_true",
        help="also time the coupling arrays by absorption (the general fixed-effect path)",
    )
    ap.add_argument("--json", type=Path, help="also write every figure to this JSON file")
    return ap.parse_args(argv)


def main(argv: list[str] | None = None) -> int:
    args = parse_args(argv)
    if min(args.sizes) < 2_000:
        raise SystemExit("--sizes: each size must be at least 2,000 (the fixed effect's levels)")
    info = machine_info()
    print("machine and libraries:")
    print(json.dumps(info, indent=2))
    print(
        f"\ndata: bench_engine.make_design cut to 1 endogenous, {N_INSTRUMENTS} instruments, "
        f"{N_CONTROLS} controls, one fixed effect with 1,000 levels, {N_CLUSTERS} clusters; "
        f"seed {args.seed}; {args.draws} draws (seed {args.bootstrap_seed}); null beta = "
        f"{TRUE_BETA} (true); {args.rounds} interleaved rounds; BLAS 1 thread"
    )
    results = []
    with threadpool_limits(limits=1):
        for n in args.sizes:
            results.append(bench_size(n, args))
    for res in results:
        print(f"\nn = {res.n:,}:\n")
        print(table(res))
    print()
    for res in results:
        for line in verdicts(res):
            print(line)
    load = ", ".join(f"{v:.2f}" for v in os.getloadavg())
    print(f"load average at the end (1, 5, 15 min): {load} on {os.cpu_count()} CPUs")
    if args.json:
        payload = {
            "machine": info,
            "results": [
                {
                    "n": r.n,
                    "wall": r.wall,
                    "cpu": r.cpu,
                    "peak_bytes": r.peak,
                    "stats": r.stats,
                    "paths": r.paths,
                }
                for r in results
            ],
        }
        args.json.write_text(json.dumps(payload, indent=2, default=float) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
