"""Transition shifts: per-specimen estimates against six kinds of reference.

The lead's SQL fetches one row per primary transition of one kind on one
branch over the current runs (retracted and superseded runs already left out);
the functions here are pure pandas/numpy.  Temperatures are in kelvin, fields
as mu0*H in tesla, times as UTC datetimes.

References, one per mode (see :func:`shifts`):

``reference``   a fixed temperature;
``collection``  the median of the other specimens (leave one out), with their
                robust scatter s = 1.4826 MAD;
``trend``       a weighted straight line in x of Fe(1-x)S through the other
                specimens (leave one out), with the robust scatter of its residuals;
``earliest``    the specimen's earliest run;
``treatment``   the specimen's runs before its latest treatment;
``run``         one named run of one specimen.

Missing uncertainties are never treated as zero: rows without a usable
standard uncertainty are left out of every weighted mean, median and fit, and
the specimen's note says so.  Output frames keep float columns as float (NaN
where nothing can be said, always with a note), ``flagged`` as pandas'
nullable boolean; :func:`to_records` turns a frame into JSON-ready dicts with
None in place of NaN.
"""

from __future__ import annotations

import bisect
import datetime as _dt
import math

import numpy as np
import pandas as pd

from magvault.errors import InvalidValue, NotFound
from magvault.queries.stats import (
    MAD_TO_SIGMA,
    MEDIAN_STANDARD_ERROR_FACTOR,
    grouped_leave_one_out_linear_fits,
    grouped_leave_one_out_median_mad,
    grouped_weighted_means,
    two_sided_p,
    weighted_linear_fit,
)

MODES = ("reference", "collection", "trend", "earliest", "treatment", "run")
GROUPINGS = ("superstructure", "origin", "parent", "field", "direction")

_MISSING_GROUP = {"direction": "no orientation", "field": "unknown field"}

#: The columns every shifts table starts with, in this order (a contract).
SHIFT_COLUMNS = ("specimen", "temperature_K", "uncertainty_K", "reference_K", "shift_K",
                 "shift_uncertainty_K", "sigma", "flagged", "note")

_REFERENCES = (
    "Birge, R. T. (1932). Phys. Rev. 40, 207-227 (Birge ratio).",
    "Rousseeuw, P. J. & Croux, C. (1993). J. Am. Stat. Assoc. 88, 1273-1283 (1.4826 MAD).",
)


# --------------------------------------------------------------------------
# Small helpers
# --------------------------------------------------------------------------

class _Notes:
    """One list of note fragments per unit, joined with '; ' at the end."""

    def __init__(self, n: int):
        self.items: list[list[str]] = [[] for _ in range(n)]

    def add(self, units, message) -> None:
        if isinstance(units, (int, np.integer)):
            units = (int(units),)
        items = self.items
        if callable(message):
            for u in units:
                items[u].append(message(u))
        else:
            for u in units:
                items[u].append(message)

    def joined(self) -> list[str | None]:
        return ["; ".join(parts) if parts else None for parts in self.items]


def _plural(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def _run_list(runs: list) -> str:
    shown = [str(_plain_scalar(r)) for r in runs[:5] if not pd.isna(r)]
    if not shown:
        return ""
    more = f" and {len(runs) - 5} more" if len(runs) > 5 else ""
    return f" (run {shown[0]})" if len(runs) == 1 else f" (runs {', '.join(shown)}{more})"


def _note_rows(notes: _Notes, df: pd.DataFrame, mask: np.ndarray, what: str,
               *, kind: str = "") -> None:
    """Add 'N <kind>runs <what> (runs ...)' to each unit with rows under ``mask``."""
    if not mask.any():
        return
    units = df["_unit"].to_numpy()[mask]
    runs = df["run"].to_numpy()[mask] if "run" in df.columns else np.full(units.size, np.nan)
    order = np.argsort(units, kind="stable")
    units, runs = units[order].tolist(), runs[order].tolist()
    start = 0
    for k in range(1, len(units) + 1):
        if k == len(units) or units[k] != units[start]:
            notes.items[units[start]].append(
                f"{_plural(k - start, kind + 'run')} {what}{_run_list(runs[start:k])}")
            start = k


def _require(frame: pd.DataFrame, columns, name: str) -> None:
    if not isinstance(frame, pd.DataFrame):
        raise InvalidValue(f"{name}: expected a pandas DataFrame, got {type(frame).__name__}",
                           field=name)
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise InvalidValue(f"{name}: missing column(s) {', '.join(missing)}; expected "
                           f"{', '.join(columns)}", field=missing[0])


def _numeric(series: pd.Series, name: str) -> np.ndarray:
    try:
        return pd.to_numeric(series, errors="raise").to_numpy(dtype=float, na_value=np.nan)
    except (ValueError, TypeError) as exc:
        raise InvalidValue(f"{name}: expected numbers ({exc})", field=name) from None


def _datetimes(series: pd.Series, name: str) -> pd.Series:
    try:
        return pd.to_datetime(series, utc=True)
    except (ValueError, TypeError) as exc:
        raise InvalidValue(f"{name}: expected ISO 8601 date-times ({exc})", field=name) from None


def _prepare(rows: pd.DataFrame, *, need_started: bool = False) -> pd.DataFrame:
    """Validated copy of the transition rows with float columns and a usable-u flag."""
    required = ["specimen", "temperature_K", "uncertainty_K"]
    required += ["started"] if need_started else []
    _require(rows, required, "rows")
    df = rows.reset_index(drop=True)  # positional arrays are used throughout
    if df["specimen"].isna().any():
        raise InvalidValue("rows: a row has no specimen; expected a specimen code on every row",
                           field="specimen")
    df["temperature_K"] = _numeric(df["temperature_K"], "temperature_K")
    df["uncertainty_K"] = _numeric(df["uncertainty_K"], "uncertainty_K")
    if "started" in df.columns:
        df["started"] = _datetimes(df["started"], "started")
    try:
        spec_code = pd.factorize(df["specimen"], sort=True)[0]
    except TypeError:
        raise InvalidValue("specimen: expected codes of one type (text)",
                           field="specimen") from None
    df["_specimen_code"] = spec_code
    if "run" in df.columns and len(df):
        run_code = pd.factorize(df["run"], use_na_sentinel=True)[0].astype(np.int64)
        key = spec_code.astype(np.int64) * (run_code.max() + 2) + run_code
        key_sorted = np.sort(key[run_code >= 0])
        repeated_keys = key_sorted[1:][key_sorted[1:] == key_sorted[:-1]]
        if repeated_keys.size:
            first = df.loc[key == repeated_keys[0]].iloc[0]
            raise InvalidValue(
                f"rows: run {_plain_scalar(first['run'])} of specimen {first['specimen']} appears "
                "more than once; expected one primary transition per run (filter kind and branch)",
                field="run")
    u = df["uncertainty_K"].to_numpy()
    df["_has_u"] = np.isfinite(u) & (u > 0)
    df["_has_t"] = np.isfinite(df["temperature_K"].to_numpy())
    return df


def _attach_units(df: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    """Unit table (one row per key combination, sorted) and a _unit code on df."""
    # Codes come from a sorted factorisation, so unique codes are in specimen order.
    spec = df["_specimen_code"].to_numpy().astype(np.int64)
    present, first, inverse = np.unique(spec, return_index=True, return_inverse=True)
    names = np.empty(spec.max() + 1, dtype=object)
    names[present] = df["specimen"].to_numpy()[first]
    if keys == ["specimen"]:
        df["_unit"] = inverse
        return pd.DataFrame({"specimen": pd.Series(names[present], dtype=object)})
    if keys != ["group", "specimen"]:
        grouper = df.groupby(keys, sort=True)
        df["_unit"] = grouper.ngroup().to_numpy()
        return grouper.size().reset_index()[keys]
    group_code, group_names = pd.factorize(df["group"], sort=True)
    combined = group_code.astype(np.int64) * len(names) + spec
    present, df["_unit"] = np.unique(combined, return_inverse=True)
    return pd.DataFrame({
        "group": pd.Series(np.asarray(group_names, dtype=object)[present // len(names)],
                           dtype=object),
        "specimen": pd.Series(names[present % len(names)], dtype=object)})


def _estimates(df: pd.DataFrame, mask: np.ndarray, n_units: int, notes: _Notes | None,
               *, what: str = "") -> dict[str, np.ndarray]:
    """Birge-inflated weighted mean per unit of the rows under ``mask``.

    Rows without a temperature or a usable uncertainty are left out (noted).  A
    unit whose rows all lack an uncertainty gets the plain mean of its values,
    NaN uncertainty, and a note: it takes no part in any significance.
    """
    codes = df["_unit"].to_numpy()
    has_t, has_u = df["_has_t"].to_numpy(), df["_has_u"].to_numpy()
    if notes is not None:
        _note_rows(notes, df, mask & ~has_t, "without a temperature left out", kind=what)
        _note_rows(notes, df, mask & has_t & ~has_u,
                   "without a standard uncertainty left out of the weighted mean", kind=what)
    good = mask & has_t & has_u
    t = df["temperature_K"].to_numpy()
    means = grouped_weighted_means(codes[good], t[good], df["uncertainty_K"].to_numpy()[good],
                                   n_units)
    value = means.value.copy()
    n_used = means.n.copy()
    plain = mask & has_t & ~has_u
    n_plain = np.bincount(codes[plain], minlength=n_units)
    only_plain = (n_used == 0) & (n_plain > 0)
    if only_plain.any():
        sums = np.bincount(codes[plain], weights=t[plain], minlength=n_units)
        value[only_plain] = sums[only_plain] / n_plain[only_plain]
        n_used[only_plain] = n_plain[only_plain]
        if notes is not None:
            notes.add(np.flatnonzero(only_plain), lambda u: (
                f"no {what}run with a standard uncertainty: the value is the plain mean of "
                f"{_plural(int(n_plain[u]), 'run')} and no significance is given"))
    return {"value": value, "uncertainty": means.uncertainty, "birge_ratio": means.birge_ratio,
            "n": n_used}


def _plain_scalar(value):
    if isinstance(value, np.generic):
        return value.item()
    return value


# --------------------------------------------------------------------------
# Per-specimen estimates
# --------------------------------------------------------------------------

def specimen_estimates(rows: pd.DataFrame, *, keys=("specimen",)) -> pd.DataFrame:
    """Per-specimen estimate of one transition kind on one branch.

    The inverse-variance weighted mean of the specimen's primary transition rows
    over its current runs, with its standard uncertainty inflated by the Birge
    ratio R_B = sqrt(chi2 / (n - 1)) when R_B > 1; a specimen with one run keeps
    that run's value and uncertainty.  Rows without a usable standard
    uncertainty are left out and named in the note; a specimen with no usable
    uncertainty at all gets the plain mean, a NaN uncertainty and a note.

    Parameters
    ----------
    rows : DataFrame
        ``specimen``, ``temperature_K`` (K), ``uncertainty_K`` (K, may be
        missing); optional ``run`` (named in notes; a run may appear once),
        ``started`` and other columns are ignored.
    keys : sequence of str
        Columns that identify an estimate (default one per specimen; pass
        ``("group", "specimen")`` for one per specimen and group).

    Returns
    -------
    DataFrame
        ``keys``..., ``temperature_K``, ``uncertainty_K``, ``n_runs`` (rows in
        the estimate), ``birge_ratio`` (NaN for one run), ``note``.

    References
    ----------
    Birge, R. T. (1932). The calculation of errors by the method of least
    squares. Phys. Rev. 40, 207-227.
    """
    keys = list(keys)
    df = _prepare(rows)
    _require(df, keys, "rows")
    if df.empty:
        return pd.DataFrame({**{k: pd.Series([], dtype=object) for k in keys},
                             "temperature_K": [], "uncertainty_K": [],
                             "n_runs": pd.Series([], dtype="int64"), "birge_ratio": [],
                             "note": pd.Series([], dtype=object)})
    units = _attach_units(df, keys)
    notes = _Notes(len(units))
    est = _estimates(df, np.ones(len(df), dtype=bool), len(units), notes)
    out = units.copy()
    out["temperature_K"] = est["value"]
    out["uncertainty_K"] = est["uncertainty"]
    out["n_runs"] = est["n"].astype("int64")
    out["birge_ratio"] = est["birge_ratio"]
    out["note"] = pd.Series(notes.joined(), index=out.index, dtype=object)
    return out


# --------------------------------------------------------------------------
# Field bins
# --------------------------------------------------------------------------

def field_bin_label(field_T, *, edges_T=None, zero_below_T: float = 0.0) -> str:
    """Label of the bin of an applied field mu0*H (T) for grouping shifts.

    Parameters
    ----------
    field_T : float or None
        Applied field mu0*H in tesla; its magnitude is binned (the sign of a
        field along one axis does not change the bin).
    edges_T : sequence of float, optional
        Increasing positive bin edges in T; bins are [edge_k, edge_k+1), with
        ``"<e0 T"`` below the first and ``">=eN T"`` above the last.  By default
        bins are decades, [10^k, 10^(k+1)) T, labelled ``"1e-2..1e-1 T"``.
    zero_below_T : float
        Fields with |mu0*H| <= this are ``"zero field"`` (default: exactly 0).

    Returns
    -------
    str
        ``"zero field"``, ``"unknown field"`` (missing or not finite), or the bin.
    """
    if field_T is None or (not isinstance(field_T, str) and pd.isna(field_T)):
        return "unknown field"
    try:
        magnitude = abs(float(field_T))
    except (TypeError, ValueError):
        raise InvalidValue(f"field_T: expected a field in tesla, got {field_T!r}",
                           field="field_T") from None
    if not math.isfinite(magnitude):
        return "unknown field"
    if magnitude <= zero_below_T:
        return "zero field"
    if edges_T is None:
        k = math.floor(math.log10(magnitude))
        # log10 may round across a decade boundary: settle on 10^k <= |B| < 10^(k+1).
        if 10.0 ** (k + 1) <= magnitude:
            k += 1
        elif 10.0**k > magnitude:
            k -= 1
        return f"1e{k}..1e{k + 1} T"
    edges = [float(e) for e in edges_T]
    if not edges or any(b <= a for a, b in zip(edges, edges[1:])) or edges[0] <= 0:
        raise InvalidValue("edges_T: expected increasing positive field edges in T",
                           field="edges_T")
    k = bisect.bisect_right(edges, magnitude)
    if k == 0:
        return f"<{edges[0]:g} T"
    if k == len(edges):
        return f">={edges[-1]:g} T"
    return f"{edges[k - 1]:g}..{edges[k]:g} T"


# --------------------------------------------------------------------------
# JSON-ready records
# --------------------------------------------------------------------------

def _plain_value(v):
    if v is None or v is pd.NA or v is pd.NaT:
        return None
    if isinstance(v, (float, np.floating)):
        return float(v) if math.isfinite(v) else None
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, np.datetime64):
        return None if np.isnat(v) else pd.Timestamp(v).isoformat()
    if isinstance(v, (pd.Timestamp, _dt.datetime, _dt.date)):
        return v.isoformat()
    if isinstance(v, np.ndarray):
        return [_plain_value(x) for x in v.tolist()]
    return v


def _plain_column(series: pd.Series) -> list:
    if isinstance(series.dtype, pd.api.extensions.ExtensionDtype):
        # Nullable integers would come out of to_numpy() as floats: go through objects.
        return [_plain_value(v) for v in series.astype(object).to_numpy()]
    values = series.to_numpy()
    if values.dtype.kind == "f":
        objects = values.astype(object)
        objects[~np.isfinite(values)] = None
        return objects.tolist()
    if values.dtype.kind in "iub":
        return values.tolist()
    return [_plain_value(v) for v in values]


def to_records(frame: pd.DataFrame) -> list[dict]:
    """Rows of ``frame`` as plain dicts ready for ``json.dumps(allow_nan=False)``.

    NaN, infinities, ``pd.NA`` and ``NaT`` become None; numpy scalars become
    Python ones; timestamps become ISO 8601 strings.
    """
    columns = [str(c) for c in frame.columns]
    data = [_plain_column(frame.iloc[:, i]) for i in range(frame.shape[1])]
    return [dict(zip(columns, values)) for values in zip(*data)] if data else \
        [{} for _ in range(len(frame))]


# --------------------------------------------------------------------------
# Shifts
# --------------------------------------------------------------------------

def _group_labels(rows: pd.DataFrame, specimens: pd.DataFrame | None, by: str,
                  field_edges_T) -> pd.Series:
    if "group" in rows.columns:
        labels = rows["group"]
    elif by == "field" and "field_T" in rows.columns:
        labels = rows["field_T"].map(lambda f: field_bin_label(f, edges_T=field_edges_T))
    elif specimens is not None and "group" in specimens.columns:
        labels = rows["specimen"].map(specimens.set_index("specimen")["group"])
    else:
        raise InvalidValue(
            f"by={by!r} needs a 'group' column in rows (per-run properties such as field or "
            "direction) or in specimens (superstructure, origin, parent)", field="group")
    missing = labels.isna().to_numpy()
    text = labels.astype(object).to_numpy().copy()
    text[missing] = _MISSING_GROUP.get(by, f"no {by}")
    return pd.Series([str(v) for v in text], index=rows.index, dtype=object)


def _check_specimens(specimens: pd.DataFrame | None, need_x: bool) -> pd.DataFrame | None:
    if specimens is None:
        if need_x:
            raise InvalidValue("mode 'trend' needs the specimens table with an 'x' column",
                               field="x")
        return None
    _require(specimens, ["specimen"] + (["x"] if need_x else []), "specimens")
    repeated = specimens["specimen"].duplicated()
    if repeated.any():
        code = specimens.loc[repeated, "specimen"].iloc[0]
        raise InvalidValue(f"specimens: specimen {code} appears more than once; expected one "
                           "row per specimen", field="specimen")
    return specimens


def shifts(rows: pd.DataFrame, specimens: pd.DataFrame | None = None, *, mode: str,
           reference_K: float | None = None, reference_run: int | None = None,
           treatments: pd.DataFrame | None = None, sigma: float = 3.0, by: str | None = None,
           min_others: int = 3, field_edges_T=None) -> pd.DataFrame:
    """Shift of each specimen's transition from a reference, with its significance.

    Every mode reports, per specimen (per specimen and group with ``by``):
    ``temperature_K`` and ``uncertainty_K`` (the specimen's Birge-inflated
    weighted mean; in the per-specimen modes, of the runs compared with the
    reference), ``reference_K``, ``shift_K`` = temperature - reference,
    ``shift_uncertainty_K`` (combined, below), ``sigma`` = shift / combined
    (signed), ``flagged`` = |sigma| >= ``sigma``, ``note``; and ``n_runs``,
    ``p_value`` = 2 (1 - Phi(|sigma|)), ``reference_uncertainty_K`` and mode
    diagnostics.  Where nothing can be said the field is NaN (None through
    :func:`to_records`) and the note says why.

    Modes and combined uncertainties:

    ``reference``
        Fixed ``reference_K``; combined = the specimen's own u_i.
    ``collection``
        Median of the m other specimens' estimates in the group (leave one
        out, m >= ``min_others``), s = 1.4826 MAD of the others (the
        population's robust scatter, which already holds typical measurement
        noise); combined = sqrt(max(s, u_i)^2 + (1.2533 s / sqrt(m))^2), so a
        noisy specimen is not flagged on its own noise and noise is not
        counted twice.  Extra columns ``m``, ``reference_scatter_K`` (s).
    ``trend``
        Weighted line (weights 1/u_j^2) of temperature against x in Fe(1-x)S
        through the other specimens with x (m >= ``min_others``, at least two
        distinct x); the shift is the residual at x_i; combined =
        sqrt(max(s_r, u_i)^2 + p_i^2), s_r = 1.4826 x the median absolute
        residual of the others, p_i = sqrt([1, x_i] C [1, x_i]^T) with C the
        unscaled covariance of their intercept and slope (s_r carries the
        scatter).  Extra columns ``x``, ``m``, ``reference_scatter_K``,
        ``trend_intercept_K``, ``trend_slope_K`` (K per unit x).
    ``earliest``
        The specimen's later runs against its earliest run (ties in start
        time go to the lower run id, noted).
    ``treatment``
        The specimen's runs after its latest treatment against its runs before
        it (weighted means); a run started exactly at the treatment time is
        left out (noted); specimens without a treatment get a note.
    ``run``
        Only ``reference_run``'s specimen: its runs started after that run
        against that run.

    In the last three, combined = sqrt(u_compared^2 + u_reference^2) and extra
    columns are ``reference_n_runs`` and ``reference_run`` or ``treatment_at``.
    Uncertainties are assumed independent between specimen and reference.

    Parameters
    ----------
    rows : DataFrame
        One row per primary transition of one kind on one branch over the
        current runs: ``specimen``, ``run``, ``started`` (UTC), ``temperature_K``
        (K), ``uncertainty_K`` (K; missing ones are left out, never zero);
        optional ``group`` (per-run property such as a field bin or the
        nearest crystal direction) or ``field_T`` (mu0*H, T, binned by
        :func:`field_bin_label` when ``by='field'``).
    specimens : DataFrame, optional
        ``specimen``, ``x`` (Fe(1-x)S; needed for ``trend``), ``group``
        (per-specimen property such as superstructure, origin or parent).
    mode : str
        One of ``MODES``.
    reference_K : float, optional
        Fixed reference (K), for ``mode='reference'``.
    reference_run : int, optional
        Run id, for ``mode='run'``.
    treatments : DataFrame, optional
        ``specimen``, ``at`` (UTC); the latest per specimen is used.
    sigma : float
        Flag threshold N: |shift| / combined >= N.
    by : str, optional
        One of ``GROUPINGS``: references of ``collection`` and ``trend`` are
        formed within the group, and a ``group`` column is added.  Missing
        labels form their own group ("no orientation", "unknown field",
        "no superstructure", ...).
    min_others : int
        Fewest other specimens that form a ``collection`` or ``trend``
        reference (default 3: a median and MAD of two values says little).
    field_edges_T : sequence of float, optional
        Field bin edges (T) when ``by='field'`` and rows carry ``field_T``.

    Returns
    -------
    DataFrame
        Columns ``SHIFT_COLUMNS`` (with ``group`` after ``specimen`` when
        grouping), then ``n_runs``, ``p_value``, ``reference_uncertainty_K`` and
        the mode's extras; sorted by group and specimen.  ``frame.attrs
        ['parameters']`` records the numerical choices.

    Raises
    ------
    InvalidValue
        Bad mode, grouping, threshold or input columns.
    NotFound
        ``reference_run`` is not among the rows.

    References
    ----------
    Birge, R. T. (1932). Phys. Rev. 40, 207-227 (Birge ratio).
    Rousseeuw, P. J. & Croux, C. (1993). J. Am. Stat. Assoc. 88, 1273-1283
    (median absolute deviation, 1.4826).
    """
    if mode not in MODES:
        raise InvalidValue(f"mode: expected one of {', '.join(MODES)}, got {mode!r}", field="mode")
    if by is not None and by not in GROUPINGS:
        raise InvalidValue(f"by: expected one of {', '.join(GROUPINGS)}, got {by!r}", field="by")
    if not (isinstance(sigma, (int, float)) and math.isfinite(sigma) and sigma > 0):
        raise InvalidValue(f"sigma: expected a positive number, got {sigma!r}", field="sigma")
    if int(min_others) < 2:
        raise InvalidValue("min_others: expected at least 2", field="min_others")
    specimens = _check_specimens(specimens, need_x=(mode == "trend"))
    per_specimen = mode in ("earliest", "treatment", "run")
    df = _prepare(rows, need_started=per_specimen)
    if per_specimen:
        _require(df, ["run"], "rows")

    keys = ["specimen"]
    if by is not None:
        df["group"] = _group_labels(df, specimens, by, field_edges_T)
        keys = ["group", "specimen"]
    elif "group" in df.columns:
        df = df.drop(columns="group")

    parameters = {"mode": mode, "sigma": float(sigma), "by": by, "min_others": int(min_others),
                  "mad_to_sigma": MAD_TO_SIGMA,
                  "median_standard_error_factor": MEDIAN_STANDARD_ERROR_FACTOR,
                  "references": list(_REFERENCES)}

    if mode == "reference":
        if reference_K is None or not math.isfinite(float(reference_K)):
            raise InvalidValue("mode 'reference' needs a finite reference_K in kelvin",
                               field="reference_K")
        parameters["reference_K"] = float(reference_K)
        out = _against_fixed(df, keys, float(reference_K))
    elif mode == "collection":
        out = _against_collection(df, keys, int(min_others))
    elif mode == "trend":
        out = _against_trend(df, keys, specimens, int(min_others))
    elif mode == "earliest":
        out = _against_earliest(df, keys)
    elif mode == "treatment":
        if treatments is None:
            raise InvalidValue("mode 'treatment' needs the treatments table (specimen, at)",
                               field="treatments")
        out = _against_treatment(df, keys, treatments)
    else:
        if reference_run is None:
            raise InvalidValue("mode 'run' needs reference_run (a run id)", field="reference_run")
        parameters["reference_run"] = _plain_scalar(reference_run)
        out = _against_run(df, keys, reference_run)

    out = _significance(out, float(sigma))
    front = ["specimen"] + (["group"] if by is not None else []) + list(SHIFT_COLUMNS[1:])
    rest = [c for c in out.columns if c not in front]
    out = out[front + rest].reset_index(drop=True)
    out.attrs["parameters"] = parameters
    return out


def _empty_result(keys: list[str]) -> pd.DataFrame:
    frame = pd.DataFrame({k: pd.Series([], dtype=object) for k in keys})
    for c in ("temperature_K", "uncertainty_K", "reference_K", "reference_uncertainty_K",
              "shift_uncertainty_K"):
        frame[c] = pd.Series([], dtype=float)
    frame["n_runs"] = pd.Series([], dtype="int64")
    frame["note"] = pd.Series([], dtype=object)
    return frame


def _significance(out: pd.DataFrame, threshold: float) -> pd.DataFrame:
    """shift, sigma, flagged and p from the estimate, the reference and the combined u."""
    t = out["temperature_K"].to_numpy(dtype=float)
    ref = out["reference_K"].to_numpy(dtype=float)
    combined = out["shift_uncertainty_K"].to_numpy(dtype=float)
    shift = np.full(t.size, np.nan)
    known = np.isfinite(t) & np.isfinite(ref)
    shift[known] = t[known] - ref[known]
    z = np.full(t.size, np.nan)
    testable = known & np.isfinite(combined) & (combined > 0)
    z[testable] = shift[testable] / combined[testable]
    combined = np.where(testable, combined, np.nan)
    flagged = pd.array(np.abs(np.where(testable, z, 0.0)) >= threshold, dtype="boolean")
    flagged[~testable] = pd.NA
    p = np.full(t.size, np.nan)
    p[testable] = two_sided_p(z[testable])
    out = out.copy()
    out["shift_K"] = shift
    out["shift_uncertainty_K"] = combined
    out["sigma"] = z
    out["flagged"] = flagged
    out["p_value"] = p
    return out


def _start(df: pd.DataFrame, keys: list[str]):
    if df.empty:
        return None, None
    units = _attach_units(df, keys)
    return units, _Notes(len(units))


def _finish(units: pd.DataFrame, notes: _Notes, columns: dict) -> pd.DataFrame:
    out = units.copy()
    for name, values in columns.items():
        out[name] = values
    out["note"] = pd.Series(notes.joined(), index=out.index, dtype=object)
    return out


# --- reference, collection, trend ------------------------------------------

def _against_fixed(df, keys, reference_K):
    units, notes = _start(df, keys)
    if units is None:
        return _empty_result(keys)
    est = _estimates(df, np.ones(len(df), dtype=bool), len(units), notes)
    n = len(units)
    return _finish(units, notes, {
        "temperature_K": est["value"], "uncertainty_K": est["uncertainty"],
        "reference_K": np.full(n, reference_K), "reference_uncertainty_K": np.zeros(n),
        "shift_uncertainty_K": est["uncertainty"], "n_runs": est["n"],
        "birge_ratio": est["birge_ratio"]})


def _group_codes(units: pd.DataFrame, keys: list[str]):
    """Integer group code per unit and a function naming a unit's group in notes."""
    if "group" not in keys:
        return np.zeros(len(units), dtype=np.intp), lambda k: ""
    codes, _ = pd.factorize(units["group"], sort=True)
    labels = units["group"].to_numpy()
    return codes.astype(np.intp), lambda k: f" in group '{labels[k]}'"


def _against_collection(df, keys, min_others):
    units, notes = _start(df, keys)
    if units is None:
        return _empty_result(keys).assign(m=pd.Series([], dtype="int64"),
                                          reference_scatter_K=pd.Series([], dtype=float))
    est = _estimates(df, np.ones(len(df), dtype=bool), len(units), notes)
    n = len(units)
    t, u = est["value"], est["uncertainty"]
    group, where = _group_codes(units, keys)
    ref, scatter, ref_u, combined = (np.full(n, np.nan) for _ in range(4))
    basis = np.isfinite(u)                      # specimens that can form a reference
    others = ~basis & np.isfinite(t)            # no uncertainty: set against all of basis
    n_basis = np.bincount(group[basis], minlength=group.max() + 1)
    m = np.where(basis, n_basis[group] - 1, n_basis[group]).astype(np.int64)
    m[~basis & ~others] = 0
    median, mad = grouped_leave_one_out_median_mad(t[basis], group[basis])
    ref[basis], scatter[basis] = median, MAD_TO_SIGMA * mad
    for g in np.unique(group[others]):
        pool = t[basis & (group == g)]
        if pool.size:
            centre = np.median(pool)
            chosen = others & (group == g)
            ref[chosen] = centre
            scatter[chosen] = MAD_TO_SIGMA * np.median(np.abs(pool - centre))
    short = np.flatnonzero((basis | others) & (m < min_others))
    notes.add(short, lambda k: (f"fewer than {min_others} other specimens with an uncertainty"
                                f"{where(k)} to form a reference (m = {m[k]})"))
    ref[short] = scatter[short] = np.nan
    ok = np.isfinite(ref) & np.isfinite(scatter) & (m > 0)
    ref_u[ok] = MEDIAN_STANDARD_ERROR_FACTOR * scatter[ok] / np.sqrt(m[ok])
    testable = ok & np.isfinite(u)
    combined[testable] = np.sqrt(np.maximum(scatter[testable], u[testable]) ** 2
                                 + ref_u[testable] ** 2)
    notes.add(np.flatnonzero(ok & (scatter == 0)),
              "the other specimens agree exactly (MAD = 0): the specimen's own uncertainty "
              "stands for the scatter")
    return _finish(units, notes, {
        "temperature_K": t, "uncertainty_K": u, "reference_K": ref,
        "reference_uncertainty_K": ref_u, "shift_uncertainty_K": combined,
        "n_runs": est["n"], "birge_ratio": est["birge_ratio"], "m": m,
        "reference_scatter_K": scatter})


def _against_trend(df, keys, specimens, min_others):
    units, notes = _start(df, keys)
    extra = {"x": float, "m": "int64", "reference_scatter_K": float,
             "trend_intercept_K": float, "trend_slope_K": float}
    if units is None:
        return _empty_result(keys).assign(**{k: pd.Series([], dtype=d) for k, d in extra.items()})
    est = _estimates(df, np.ones(len(df), dtype=bool), len(units), notes)
    n = len(units)
    t, u = est["value"], est["uncertainty"]
    x = _numeric(units["specimen"].map(specimens.set_index("specimen")["x"]), "x")
    group, where = _group_codes(units, keys)
    ref, scatter, ref_u, combined, intercept, slope = (np.full(n, np.nan) for _ in range(6))
    notes.add(np.flatnonzero(~np.isfinite(x)), "no composition x")
    with_x = np.isfinite(x) & np.isfinite(t)
    basis = with_x & np.isfinite(u)
    others = with_x & ~basis
    n_basis = np.bincount(group[basis], minlength=group.max() + 1)
    m = np.where(basis, n_basis[group] - 1, n_basis[group]).astype(np.int64)
    m[~with_x] = 0
    short = with_x & (m < min_others)
    notes.add(np.flatnonzero(short), lambda k: (
        f"fewer than {min_others} other specimens with x and an uncertainty{where(k)} to "
        f"form a trend (m = {m[k]})"))
    # Leave-one-out lines only where every member has enough others (m >= min_others).
    idx = np.flatnonzero(basis & ~short)
    fits = grouped_leave_one_out_linear_fits(x[idx], t[idx], u[idx], group[idx])
    good = fits.distinct_x >= 2
    notes.add(idx[~good], lambda k: f"the other specimens{where(k)} share one x value: no trend")
    b = idx[good]
    ref[b], ref_u[b] = fits.prediction[good], fits.prediction_uncertainty[good]
    scatter[b] = MAD_TO_SIGMA * fits.median_abs_residual[good]
    intercept[b], slope[b] = fits.intercept[good], fits.slope[good]
    for g in np.unique(group[others & ~short]):
        pool = basis & (group == g)
        chosen = others & (group == g)
        if np.unique(x[pool]).size < 2:
            notes.add(np.flatnonzero(chosen),
                      lambda k: f"the other specimens{where(k)} share one x value: no trend")
            continue
        fit = weighted_linear_fit(x[pool], t[pool], u[pool])
        ref[chosen] = fit.predict(x[chosen])
        ref_u[chosen] = fit.prediction_uncertainty(x[chosen])
        scatter[chosen] = MAD_TO_SIGMA * np.median(np.abs(fit.residuals))
        intercept[chosen], slope[chosen] = fit.intercept, fit.slope
    testable = np.isfinite(ref) & np.isfinite(u)
    combined[testable] = np.sqrt(np.maximum(scatter[testable], u[testable]) ** 2
                                 + ref_u[testable] ** 2)
    return _finish(units, notes, {
        "temperature_K": t, "uncertainty_K": u, "reference_K": ref,
        "reference_uncertainty_K": ref_u, "shift_uncertainty_K": combined,
        "n_runs": est["n"], "birge_ratio": est["birge_ratio"], "x": x, "m": m,
        "reference_scatter_K": scatter, "trend_intercept_K": intercept,
        "trend_slope_K": slope})


# --- earliest, treatment, run ----------------------------------------------

def _per_specimen_columns(compared, reference, reference_n, extra):
    t, u = compared["value"], compared["uncertainty"]
    ref, ref_u = reference["value"], reference["uncertainty"]
    combined = np.full(t.size, np.nan)
    both = np.isfinite(u) & np.isfinite(ref_u)
    combined[both] = np.sqrt(u[both] ** 2 + ref_u[both] ** 2)
    return {"temperature_K": t, "uncertainty_K": u, "reference_K": ref,
            "reference_uncertainty_K": ref_u, "shift_uncertainty_K": combined,
            "n_runs": compared["n"], "birge_ratio": compared["birge_ratio"],
            "reference_n_runs": reference_n, **extra}


def _nanoseconds(started: pd.Series) -> np.ndarray:
    """Start times as int64 nanoseconds since the epoch (rows without one are masked by callers)."""
    return pd.DatetimeIndex(started).as_unit("ns").asi8


def _note_no_start(df, notes):
    missing = df["started"].isna().to_numpy()
    _note_rows(notes, df, missing, "without a start time left out (cannot be ordered)")
    return ~missing


def _against_earliest(df, keys):
    units, notes = _start(df, keys)
    if units is None:
        return _empty_result(keys).assign(reference_n_runs=pd.Series([], dtype="int64"),
                                          reference_run=pd.Series([], dtype="Int64"))
    n = len(units)
    timed = _note_no_start(df, notes)
    has_t = df["_has_t"].to_numpy()
    _note_rows(notes, df, timed & ~has_t, "without a temperature left out")
    usable = timed & has_t
    # Order each unit's usable rows by start time, then run id (ties go to the lower id).
    unit_of = df["_unit"].to_numpy()
    start_ns = _nanoseconds(df["started"])
    run_key = pd.factorize(df["run"], sort=True)[0]
    rows_used = np.flatnonzero(usable)
    ordered = rows_used[np.lexsort((run_key[rows_used], start_ns[rows_used], unit_of[rows_used]))]
    is_first = np.ones(ordered.size, dtype=bool)
    is_first[1:] = unit_of[ordered[1:]] != unit_of[ordered[:-1]]
    first_rows = ordered[is_first]
    ref_mask = np.zeros(len(df), dtype=bool)
    ref_mask[first_rows] = True
    cmp_mask = usable & ~ref_mask
    compared = _estimates(df, cmp_mask, n, notes, what="later ")
    reference = _estimates(df, ref_mask, n, None)
    runs = df["run"].to_numpy()
    ref_run = pd.array([pd.NA] * n, dtype="Int64")
    ref_run[unit_of[first_rows]] = runs[first_rows]

    # Runs sharing the earliest start: the lower run id is the reference (sorted above).
    earliest_ns = np.zeros(n, dtype=np.int64)
    earliest_ns[unit_of[first_rows]] = start_ns[first_rows]
    tied = ordered[start_ns[ordered] == earliest_ns[unit_of[ordered]]]
    tie_count = np.bincount(unit_of[tied], minlength=n)
    for unit in np.flatnonzero(tie_count > 1):
        part = runs[tied[unit_of[tied] == unit]]
        notes.add(unit, f"runs {', '.join(str(_plain_scalar(r)) for r in part)} share the "
                        f"earliest start; run {_plain_scalar(part[0])} is the reference")
    first = df.iloc[first_rows]
    lacking = first.loc[~first["_has_u"].to_numpy()]
    for unit, run in zip(lacking["_unit"], lacking["run"]):
        notes.add(unit, f"the earliest run {_plain_scalar(run)} has no standard uncertainty: "
                        "no significance")
    counts = np.bincount(df["_unit"].to_numpy()[cmp_mask], minlength=n)
    notes.add(np.flatnonzero(counts == 0), "no runs after the earliest")
    return _finish(units, notes, _per_specimen_columns(
        compared, reference, reference["n"], {"reference_run": ref_run}))


def _against_treatment(df, keys, treatments):
    _require(treatments, ["specimen", "at"], "treatments")
    units, notes = _start(df, keys)
    if units is None:
        return _empty_result(keys).assign(reference_n_runs=pd.Series([], dtype="int64"),
                                          treatment_at=pd.Series([], dtype="datetime64[ns, UTC]"))
    n = len(units)
    at = _datetimes(treatments["at"], "at")
    latest = pd.Series(at.to_numpy(), index=treatments["specimen"].to_numpy()).dropna()
    latest = latest.groupby(level=0).max()
    when = pd.to_datetime(df["specimen"].map(latest), utc=True)
    treated = when.notna().to_numpy()
    timed = _note_no_start(df, notes)
    started = df["started"]
    before = (timed & treated & (started < when).fillna(False).to_numpy())
    after = (timed & treated & (started > when).fillna(False).to_numpy())
    same = timed & treated & ~before & ~after
    _note_rows(notes, df, same, "started at the treatment time left out")
    compared = _estimates(df, after, n, notes, what="after-treatment ")
    reference = _estimates(df, before, n, notes, what="before-treatment ")
    unit_when = pd.to_datetime(units["specimen"].map(latest), utc=True)
    untreated = unit_when.isna().to_numpy()
    notes.add(np.flatnonzero(untreated), "no treatment recorded")
    codes = df["_unit"].to_numpy()
    n_before = np.bincount(codes[before], minlength=n)
    n_after = np.bincount(codes[after], minlength=n)
    notes.add(np.flatnonzero(~untreated & (n_before == 0)),
              lambda k: f"no runs before the latest treatment ({unit_when.iloc[k].isoformat()})")
    notes.add(np.flatnonzero(~untreated & (n_after == 0)),
              lambda k: f"no runs after the latest treatment ({unit_when.iloc[k].isoformat()})")
    return _finish(units, notes, _per_specimen_columns(
        compared, reference, reference["n"], {"treatment_at": unit_when.to_numpy()}))


def _against_run(df, keys, reference_run):
    hits = df.index[(df["run"] == reference_run).fillna(False).to_numpy()]
    if len(hits) == 0:
        raise NotFound(f"reference_run: run {reference_run} has no transition among the rows "
                       "given (is it of this kind and branch, and current?)",
                       field="reference_run")
    ref_row = df.loc[hits[0]]
    df = df.loc[df["specimen"] == ref_row["specimen"]].reset_index(drop=True)
    units, notes = _start(df, keys)
    n = len(units)
    ref_value = np.full(n, ref_row["temperature_K"])
    ref_u = np.full(n, ref_row["uncertainty_K"] if ref_row["_has_u"] else np.nan)
    timed = _note_no_start(df, notes)
    is_ref = (df["run"] == reference_run).fillna(False).to_numpy()
    if pd.isna(ref_row["started"]):
        notes.add(np.arange(n), f"reference run {_plain_scalar(reference_run)} has no start "
                                "time: no later runs can be told")
        later = np.zeros(len(df), dtype=bool)
    else:
        later = timed & ~is_ref & (df["started"] > ref_row["started"]).fillna(False).to_numpy()
        same = timed & ~is_ref & (df["started"] == ref_row["started"]).fillna(False).to_numpy()
        _note_rows(notes, df, same, "started with the reference run left out")
    compared = _estimates(df, later, n, notes, what="later ")
    if not ref_row["_has_t"]:
        notes.add(np.arange(n), f"reference run {_plain_scalar(reference_run)} has no "
                                "temperature")
    elif not ref_row["_has_u"]:
        notes.add(np.arange(n), f"reference run {_plain_scalar(reference_run)} has no "
                                "standard uncertainty: no significance")
    counts = np.bincount(df["_unit"].to_numpy()[later], minlength=n)
    notes.add(np.flatnonzero(counts == 0),
              f"no runs after run {_plain_scalar(reference_run)}")
    reference = {"value": ref_value, "uncertainty": ref_u}
    run_ids = pd.array([_plain_scalar(reference_run)] * n, dtype="Int64")
    return _finish(units, notes, _per_specimen_columns(
        compared, reference, np.ones(n, dtype=np.int64), {"reference_run": run_ids}))
