"""Heating and cooling branches of a temperature sweep.

A thermomagnetic run keeps its heating and cooling segments in one series; each
row is labelled from the direction of the *smoothed* temperature, so that
thermometer noise does not flip the label, and a plateau (a hold at the top of a
sweep) keeps the label of the segment before it.  Everything is vectorised: a
million rows cost a few array passes.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputFileError

__all__ = ["label_branches", "normalise_branch_values"]

_HEATING_WORDS = frozenset({"heating", "heat", "h", "warming", "warm", "w", "up", "u", "+", "+1", "1",
                            "ascending", "increasing", "rising"})
_COOLING_WORDS = frozenset({"cooling", "cool", "c", "down", "d", "-", "-1", "descending", "decreasing",
                            "falling"})


_WORDS = np.array(["heating", "cooling", ""], dtype=object)


def _moving_average(x: np.ndarray, window: int) -> np.ndarray:
    """Centred moving average; the window shrinks at the two ends (no padding artefacts)."""
    n = len(x)
    half = window // 2
    c = np.empty(n + 1)
    c[0] = 0.0
    np.cumsum(x, out=c[1:])
    out = np.empty(n)
    if n >= window:
        out[half:n - half] = (c[window:] - c[:n - window + 1]) / window
    head = np.arange(min(half, n))
    out[head] = c[np.minimum(head + half + 1, n)] / np.minimum(head + half + 1, n)
    tail = np.arange(max(n - half, 0), n)
    lo = np.maximum(tail - half, 0)
    out[tail] = (c[n] - c[lo]) / (n - lo)
    return out


def _noise_of_steps(t: np.ndarray, max_pairs: int = 100_000) -> float:
    """Standard deviation of single-point noise from the MAD of first differences.

    A large series is sampled at evenly spaced pairs, which keeps the cost fixed.
    """
    n = len(t)
    if n < 3:
        return 0.0
    if n - 1 > max_pairs:
        idx = np.linspace(0, n - 2, max_pairs).astype(np.int64)
        d = t[idx + 1] - t[idx]
    else:
        d = np.diff(t)
    mad = float(np.median(np.abs(d - np.median(d))))
    # MAD -> sigma for a normal law; a difference of two points has sqrt(2) times the noise.
    return 1.4826 * mad / np.sqrt(2.0)


def label_branches(temperature_K: np.ndarray, *, window: int | None = None, lag: int | None = None,
                   plateau_K: float | None = None, plateau_fraction: float = 0.1,
                   min_run: int | None = None, decimate_above: int = 40_000) -> np.ndarray:
    """Label each row 'heating' or 'cooling' from the direction of the temperature.

    The temperature is smoothed by a centred moving average, its direction at row i is
    the sign of ``Ts[i + lag] - Ts[i - lag]``, changes smaller than a plateau threshold
    keep the previous label (a hold at the top of a sweep stays on the branch before
    it), and runs of one direction shorter than ``min_run`` rows join the run before
    them.

    Parameters
    ----------
    temperature_K : ndarray
        Temperatures in measurement order, K.
    window : int, optional
        Points in the moving average.  Default: ``max(9, n // 200)``, so that in a long,
        finely sampled sweep the drift across a window stands well above thermometer
        noise; at most a quarter of the series.
    lag : int, optional
        Half the span of the centred difference (default: half the window, at least 1).
    plateau_K : float, optional
        Changes (over ``2 * lag`` rows) at or below this are a plateau.  Default: the
        larger of three times the noise of that difference (single-point noise from the
        median absolute deviation of first differences) and ``plateau_fraction`` of the
        90th percentile of the absolute changes (so a slow drift during a hold does not
        count as a sweep).
    plateau_fraction : float
        See ``plateau_K``.
    min_run : int, optional
        Shortest run of one direction kept as such (default: the window).
    decimate_above : int
        A longer series is averaged in blocks of about a ninth of the window before the
        direction is decided (spans, thresholds and labels stay the same up to a block;
        the cost falls by the block size).

    Returns
    -------
    ndarray of str (object)
        'heating' or 'cooling' per row; all '' when the temperature never moves.
    """
    t = np.asarray(temperature_K, dtype=np.float64)
    n = len(t)
    if n == 0:
        return np.empty(0, dtype=object)
    finite = np.isfinite(t)
    if not finite.all():
        if not finite.any():
            return _WORDS[np.full(n, 2)]
        # Gaps in the thermometer trace: carry the last good reading through them.
        idx = np.where(finite, np.arange(n), -1)
        np.maximum.accumulate(idx, out=idx)
        idx[idx < 0] = int(np.argmax(finite))
        t = t[idx]
    if window is None:
        window = max(9, n // 200)
    min_run = window if min_run is None else int(min_run)
    lag = max(1, int(window) // 2) if lag is None else max(1, int(lag))
    # A long series is first averaged in blocks of about a ninth of the window: the
    # direction is decided on the block means (same physical spans), then expanded.
    block = max(1, int(window) // 9) if n > decimate_above else 1
    if block > 1:
        m = n // block
        means = t[:m * block].reshape(m, block).mean(axis=1)
        if n > m * block:
            means = np.append(means, t[m * block:].mean())
        sign_b = _direction(means, max(1, round(window / block)), max(1, round(lag / block)),
                            plateau_K, plateau_fraction, max(1, round(min_run / block)))
        if sign_b is None:
            return _WORDS[np.full(n, 2)]
        sign = np.repeat(sign_b, block)[:n]
        if len(sign) < n:
            sign = np.append(sign, np.full(n - len(sign), sign_b[-1], dtype=np.int8))
    else:
        sign = _direction(t, window, lag, plateau_K, plateau_fraction, min_run)
        if sign is None:
            return _WORDS[np.full(n, 2)]
    return _WORDS[(sign < 0).astype(np.int64)]


def _direction(t: np.ndarray, window: int, lag: int, plateau_K: float | None, plateau_fraction: float,
               min_run: int) -> np.ndarray | None:
    """+1 heating / -1 cooling per point (int8), or None when the temperature never moves."""
    n = len(t)
    window = max(1, min(int(window), n // 4))
    window -= 1 - window % 2  # odd, so the average is centred
    window = max(window, 1)
    lag = max(1, min(int(lag), max(1, n // 4)))
    smooth = _moving_average(t, window) if window > 1 else t
    change = np.empty(n)
    if n > 2 * lag:
        change[lag:n - lag] = smooth[2 * lag:] - smooth[:n - 2 * lag]
    # Near the ends the difference reaches only as far as the series does.
    ends = np.concatenate((np.arange(min(lag, n)), np.arange(max(n - lag, 0), n)))
    change[ends] = smooth[np.minimum(ends + lag, n - 1)] - smooth[np.maximum(ends - lag, 0)]
    if plateau_K is None:
        noise = 3.0 * _noise_of_steps(t) * np.sqrt(2.0 / window)
        sample = np.abs(change[:: max(1, n // 100_000)])
        typical = float(np.percentile(sample, 90)) if len(sample) else 0.0
        span = float(t.max() - t.min())
        plateau_K = max(noise, plateau_fraction * typical, 1e-9 * max(span, 1.0))
    sign = (change > plateau_K).astype(np.int8) - (change < -plateau_K).astype(np.int8)
    moving = sign != 0
    if not moving.any():
        return None
    # Plateaus keep the previous direction; a leading plateau takes the first direction.
    pos = np.where(moving, np.arange(n), -1)
    np.maximum.accumulate(pos, out=pos)
    pos[pos < 0] = int(np.argmax(moving))
    return _absorb_short_runs(sign[pos], min_run)


def _absorb_short_runs(sign: np.ndarray, min_run: int) -> np.ndarray:
    if min_run <= 1 or len(sign) < 2:
        return sign
    edges = np.flatnonzero(np.diff(sign)) + 1
    if len(edges) == 0:
        return sign
    starts = np.concatenate(([0], edges))
    ends = np.concatenate((edges, [len(sign)]))
    values = sign[starts]
    lengths = ends - starts
    # A short run takes the direction of the nearest long run before it (the first run,
    # when short, that of the first long run after it).
    long_run = lengths >= min_run
    if not long_run.any():
        return sign
    k = np.arange(len(values))
    last_long = np.where(long_run, k, -1)
    np.maximum.accumulate(last_long, out=last_long)
    first_long = int(np.argmax(long_run))
    last_long[last_long < 0] = first_long
    values = values[last_long]
    return np.repeat(values, lengths)


def normalise_branch_values(values: np.ndarray, row_lines: np.ndarray, *, source_name: str,
                            column: str) -> np.ndarray:
    """Branch labels written in a file -> 'heating'/'cooling'.

    Raises
    ------
    InputFileError
        At the first label that says neither, naming line and column.
    """
    # Few distinct labels in many rows: decide each distinct label once.
    uniques, inverse = np.unique(np.asarray([("" if v is None else str(v)) for v in values],
                                            dtype=object), return_inverse=True)
    codes = np.empty(len(uniques), dtype=np.int64)
    for k, v in enumerate(uniques):
        word = v.strip().lower()
        if word in _HEATING_WORDS:
            codes[k] = 0
        elif word in _COOLING_WORDS:
            codes[k] = 1
        else:
            first = int(np.flatnonzero(inverse == k)[0])
            v = values[first]
            raise InputFileError(f"branch label {v!r}: expected heating or cooling (or up/down, "
                                 "warming/cooling)", path=source_name, line=int(row_lines[first]),
                                 column=column)
    return _WORDS[codes[inverse]]
