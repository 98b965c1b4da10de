"""Columnar storage of a run's series: one uncompressed .npz blob per series version.

Float, integer and boolean columns keep their dtype; text columns (``branch``)
are stored as fixed-width unicode with a mask for missing values, so no pickle
is ever needed to read a blob back.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd

_ORDER = "__columns__"
_MASK = "__mask__"


def pack_frame(frame: pd.DataFrame) -> bytes:
    arrays: dict[str, np.ndarray] = {}
    names = [str(c) for c in frame.columns]
    for i, name in enumerate(names):
        col = frame.iloc[:, i]
        key = f"c{i}"
        if pd.api.types.is_bool_dtype(col.dtype) or pd.api.types.is_integer_dtype(col.dtype) \
                or pd.api.types.is_float_dtype(col.dtype):
            arrays[key] = col.to_numpy()
        else:
            missing = col.isna().to_numpy()
            arrays[key] = np.asarray(col.where(~missing, "").astype(str).to_numpy(), dtype=str)
            if missing.any():
                arrays[_MASK + key] = missing
    arrays[_ORDER] = np.asarray(names, dtype=str)
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    return buf.getvalue()


def unpack_frame(blob: bytes) -> pd.DataFrame:
    with np.load(io.BytesIO(blob), allow_pickle=False) as npz:
        names = [str(n) for n in npz[_ORDER]]
        data = {}
        for i, name in enumerate(names):
            key = f"c{i}"
            values = npz[key]
            if values.dtype.kind == "U":
                series = pd.Series(values, dtype="str")
                if _MASK + key in npz.files:
                    series = series.mask(npz[_MASK + key])
                data[name] = series
            else:
                data[name] = values
    return pd.DataFrame(data, columns=names)
