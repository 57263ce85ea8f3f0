"""Compute the tF critical-value curves of the conventional levels and write them as a table.

The tF procedure (Lee, McCrary, Moreira & Porter 2022) reads the 2SLS t-ratio against a
critical value c(F) that depends on the first-stage F. ``reportkit/checks/tf_curve.py``
derives c(F) from the paper's definition (the construction is described there); this script
runs it for the 90%, 95% and 99% levels on the nodes reportkit reads and writes
reportkit/checks/data/tf_critical_values.json, so that a run at those levels does not
recompute them. Other levels are computed when asked for, by the same function on the same
nodes, so the table is a cache: tests/test_tf.py checks that it matches the function.

It also prints two checks of the numerical accuracy: the curves on the nodes against the
same curves marched on a grid about five times finer, and the 5% curve against the values
published with the paper (rounded up to the next hundredth there).

Run from the repository root:  python benchmarks/make_tf_table.py   (a few seconds)
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

import numpy as np
from scipy import stats

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from reportkit.checks.tf_curve import (  # noqa: E402
    CriticalCurve,
    march_grid,
    node_grid,
    solve_curve,
)

OUT_FILE = ROOT / "reportkit" / "checks" / "data" / "tf_critical_values.json"
LEVELS = (0.90, 0.95, 0.99)


def level_z(level: float) -> float:
    return float(stats.norm.isf((1 - level) / 2))


def table(curves: dict[float, CriticalCurve]) -> dict:  # type: ignore[type-arg]
    return {
        "description": (
            "tF critical values c(F) (Lee, McCrary, Moreira & Porter 2022) at three levels: "
            "nodes s = sqrt(F) - z and critical values c, computed by "
            "reportkit.checks.tf_curve.solve_curve(z, node_grid(z)); read with "
            "CriticalCurve.at_sqrt_f (monotone cubic in log-log, 1/F tail)."
        ),
        "reference": "Lee, McCrary, Moreira & Porter 2022, American Economic Review 112(10)",
        "generated_by": "benchmarks/make_tf_table.py",
        "levels": [
            {
                "level": level,
                "z": cv.z,
                "s": [float(v) for v in cv.s],  # exact: the table reproduces the function
                "c": [float(v) for v in cv.c],
            }
            for level, cv in curves.items()
        ],
    }


def accuracy_report(curves: dict[float, CriticalCurve]) -> None:
    for level, cv in curves.items():
        fine = solve_curve(cv.z, march_grid(cv.z))
        f = cv.z + np.geomspace(1e-5, 150, 4000)
        a = np.array([cv.at_sqrt_f(x) for x in f])
        b = np.array([fine.at_sqrt_f(x) for x in f])
        rel = np.abs(a - b) / b
        print(f"level {level}: max relative difference from the finer march {rel.max():.1e}")
    # LMMP 2022, 5% critical values at sqrt(F) = 2.0, 2.5, ..., 10.0 as published (rounded
    # up to two decimals), transcribed from a third-party reproduction of the table
    published = [18.66, 4.92, 3.65, 3.11, 2.80, 2.60, 2.46, 2.35, 2.27, 2.21, 2.16, 2.11,
                 2.08, 2.04, 2.02, 1.99, 1.97]  # fmt: skip
    cv = curves[0.95]
    for k, pub in enumerate(published):
        f = 2.0 + 0.5 * k
        c = cv.at_sqrt_f(f)
        assert c is not None
        ok = "ok" if math.ceil(round(c * 100, 9)) / 100 == pub else "DIFFERS"
        print(f"sqrt(F) = {f:4.1f}: c = {c:.5f}, published {pub:.2f}  {ok}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=OUT_FILE)
    ap.add_argument("--no-check", action="store_true", help="skip the accuracy report")
    args = ap.parse_args()
    curves = {lv: solve_curve(level_z(lv), node_grid(level_z(lv))) for lv in LEVELS}
    for level, cv in curves.items():
        assert cv.majorant_raise == 0.0, f"level {level}: the curve was not monotone"
        at_z = np.nonzero(cv.c <= cv.z)[0]
        start = f"F = {(cv.z + cv.s[at_z[0]]) ** 2:.2f}" if at_z.size else "no F in the table"
        print(f"level {level}: c reaches z = {cv.z:.4f} at {start}")
    if not args.no_check:
        accuracy_report(curves)
    args.out.parent.mkdir(parents=True, exist_ok=True)
    text = json.dumps(table(curves), indent=1) + "\n"
    args.out.write_text(text, encoding="utf-8")
    print(f"wrote {args.out.relative_to(ROOT)} ({len(text) // 1024} KiB)")


if __name__ == "__main__":
    main()
