"""Server-side decimation for dashboard overlays: 200 curves of 5,000 points, against 1 s.

    python bench/decimate.py [--quick]

DESIGN.md section 8: overlays of 200 curves are decimated server-side with
largest-triangle-three-buckets (Steinarsson, 2013) so a page stays responsive.
This times :func:`magvault.analysis.decimate.lttb` on 200 random-walk curves
(a slow temperature sweep against a drifting signal) of 5,000 points each, at
100, 300 and 1,000 points kept, best of several repeats, and prints the time for
all 200 curves as a ratio against 1 s (goal: at most 1).
"""

from __future__ import annotations

import sys

import numpy as np

from _common import Row, arguments, interleaved_best, machine, print_table, seconds

N_CURVES = 200
N_POINTS = 5_000
N_OUT = (100, 300, 1_000)
BUDGET_S = 1.0


def curves(seed: int = 3) -> list[tuple[np.ndarray, np.ndarray]]:
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(N_CURVES):
        x = np.cumsum(rng.uniform(0.0, 0.2, N_POINTS)) + 5.0          # a sweep that never turns back
        y = np.cumsum(rng.normal(0.0, 1.0, N_POINTS))                  # a random walk
        out.append((x, y))
    return out


def main() -> int:
    from magvault.analysis.decimate import lttb

    args = arguments(__doc__.splitlines()[0])
    repeats = 3 if args.quick else 7
    data = curves()
    for n_out in N_OUT:  # warm-up, and a check that each curve comes back at the size asked for
        if any(len(lttb(x, y, n_out)) != n_out for x, y in data[:5]):
            raise AssertionError(f"lttb did not return {n_out} points")

    def run(n_out: int):
        return lambda: [lttb(x, y, n_out) for x, y in data]

    best = interleaved_best({n: run(n) for n in N_OUT}, repeats)
    print(f"magvault decimation benchmark -- {machine()}")
    print_table(f"{N_CURVES} curves x {N_POINTS:,} points (best of {repeats})", [
        Row(f"lttb to {n:,} points, all curves / 1 s", "<= 1.0", f"{best[n] / BUDGET_S:.3f} ({seconds(best[n])})",
            best[n] <= BUDGET_S) for n in N_OUT])
    return 0


if __name__ == "__main__":
    sys.exit(main())
