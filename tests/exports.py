"""Exports written the way a new user's instruments would write them, for the end-to-end tests.

Curves come from the Weiss mean-field model (magvault.analysis.meanfield, checked
against scipy's brentq in test_meanfield.py) and a smooth low-temperature step.
"""

from __future__ import annotations

import numpy as np

from magvault.analysis.meanfield import reduced_magnetisation


def low_t_csv(t0: float, seed: int, *, height=0.04, width=1.0, noise=0.001) -> str:
    rng = np.random.default_rng(seed)
    T = np.arange(5.0, 80.0, 0.5)
    m = 2.0e-3 * (1 - 0.002 * T) * (1 - height / (1 + np.exp(-(T - t0) / width)))
    m = m * (1 + noise * rng.standard_normal(T.size))
    return "Temperature (K),Moment (emu)\n" + "".join(f"{a:.2f},{b:.7e}\n" for a, b in zip(T, m))


def ordering_csv_celsius_decimal_comma(tc_K: float, seed: int) -> str:
    rng = np.random.default_rng(seed)
    T = np.arange(400.0, 680.0, 1.0)
    m = 5.0e-3 * reduced_magnetisation(T, tc_K) * (1 + 0.002 * rng.standard_normal(T.size))
    heat = "".join(f"{t - 273.15:.2f};{v:.6e}\n".replace(".", ",") for t, v in zip(T, m))
    return "Temp (°C);M (emu)\n" + heat
