"""Group keys: cleaning raw group values into keys, their documented order, and the integer
code of every row (the one home of these rules; the cells layer uses them too).

Group keys: numbers (1 and 1.0 are one group), dates and times, text (exact: case and spaces
count), true/false, and blank (None, NaN, NaT or empty text are one blank group). Groups come
out in this order: numbers ascending, then dates and times ascending, then text sorted without
regard to case (ties by exact text), then false, true, then the blank group last.
"""

from __future__ import annotations

import datetime as dt
import decimal
import numbers

import numpy as np
from scipy import sparse

from ..errors import ModelError, ModelErrorKind

_NUMBER, _DATE, _TEXT, _BOOL, _BLANK = range(5)
_EPOCH = dt.datetime(1970, 1, 1)


def _is_missing(v) -> bool:
    if v is None:
        return True
    if isinstance(v, str):
        return not v.strip()
    try:
        return bool(v != v)  # NaN, NaT
    except (TypeError, ValueError):
        return True  # pandas.NA and similar missing markers refuse comparison


def normal_form(v) -> tuple[int, object]:
    """(kind, key) of one raw group value."""
    if _is_missing(v):
        return _BLANK, None
    if isinstance(v, (bool, np.bool_)):
        return _BOOL, bool(v)
    if isinstance(v, str):
        return _TEXT, str(v)
    if isinstance(v, (int, np.integer)):
        return _NUMBER, int(v)
    if isinstance(v, (numbers.Real, decimal.Decimal)):
        return _NUMBER, float(v)
    if isinstance(v, np.datetime64):
        return _DATE, v.astype("datetime64[us]").item()
    if isinstance(v, (dt.date, dt.time)):
        return _DATE, v
    raise ModelError("group keys must be numbers, text, dates, true/false or blank; got "
                     f"{type(v).__name__} {v!r}", ModelErrorKind.DATA)


def normalize_key(v) -> object:
    """The group a raw value belongs to: a Python int/float/str/bool/date, or None (blank)."""
    return normal_form(v)[1]


def _date_seconds(v) -> tuple[int, float]:
    if isinstance(v, dt.datetime):
        if v.tzinfo is not None and v.utcoffset() is not None:
            return 0, v.timestamp()
        return 0, (v - _EPOCH).total_seconds()
    if isinstance(v, dt.date):
        return 0, float((v - _EPOCH.date()).days * 86400)
    return 1, v.hour * 3600.0 + v.minute * 60 + v.second + v.microsecond / 1e6


def _sort_key(kind: int, key) -> tuple:
    if kind == _NUMBER:
        return (0, key)
    if kind == _DATE:
        sub, sec = _date_seconds(key)
        return (1, sub, sec, type(key).__name__, str(key))
    if kind == _TEXT:
        return (2, key.casefold(), key)
    if kind == _BOOL:
        return (3, key)
    return (4,)


def group_sort_key(v) -> tuple:
    """Sort key giving the documented group order for a raw or normalized key."""
    return _sort_key(*normal_form(v))


def _merge_uniques(values: list) -> tuple[np.ndarray, list]:
    """Map each of a few distinct raw values to its group index in key order."""
    normal = [normal_form(v) for v in values]
    distinct = sorted(set(normal), key=lambda kv: _sort_key(*kv))
    rank = {kv: i for i, kv in enumerate(distinct)}
    return (np.array([rank[kv] for kv in normal], dtype=np.intp),
            [kv[1] for kv in distinct])


def _int_codes(arr: np.ndarray, copy: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Codes and sorted unique values of an integer array (a presence table when the range
    is small: much faster than sorting). ``copy=False``: the codes may be ``arr`` itself
    (when it holds every value of 0..G-1 already)."""
    lo, hi = int(arr.min()), int(arr.max())
    if hi - lo <= max(4 * arr.size, 1 << 16):
        off = (arr - lo).astype(np.intp) if lo else arr.astype(np.intp, copy=copy)
        present = np.zeros(hi - lo + 1, dtype=bool)
        present[off] = True
        if present.all():  # the values are consecutive: their offsets are the codes
            return off, np.arange(lo, hi + 1)
        rank = np.cumsum(present) - 1
        return rank[off], np.flatnonzero(present) + lo
    uniq, inv = np.unique(arr, return_inverse=True)
    return inv.ravel(), uniq


def group_codes(group, copy: bool = True) -> tuple[np.ndarray, list]:
    """Integer code per row (0..G-1 in key order) and the G normalized keys (``copy=False``:
    the codes may be ``group`` itself when it holds them already)."""
    arr = None
    if isinstance(group, np.ndarray) or (hasattr(group, "dtype") and hasattr(group, "__array__")):
        arr = np.asarray(group)
        if arr.ndim == 2 and 1 in arr.shape:
            arr = arr.ravel()
        if arr.ndim != 1:
            raise ModelError(f"group must be one column of keys; got shape {arr.shape}",
                             ModelErrorKind.DATA)
    if arr is None:
        values = list(group)
        kinds = set(map(type, values))
        if values and kinds == {int}:
            try:
                arr = np.array(values, dtype=np.int64)
            except OverflowError:
                arr = None
        elif values and kinds <= {float, type(None)}:
            arr = np.array(values, dtype=float)
        if arr is None:
            return _generic_codes(values, kinds)
    n = arr.size
    if n == 0:
        return np.zeros(0, dtype=np.intp), []
    kind = arr.dtype.kind
    if kind in "iu":
        codes, uniq = _int_codes(arr, copy)
        return codes, uniq.tolist()
    if kind == "f":
        nan = np.isnan(arr)
        vals = arr[~nan] if nan.any() else arr
        codes = np.empty(n, dtype=np.intp)
        if vals.size == 0:
            codes.fill(0)
            return codes, [None]
        whole = (np.all(np.isfinite(vals)) and np.all(np.abs(vals) < 2.0**53)
                 and np.all(vals == np.round(vals)))
        if whole:
            c, uniq = _int_codes(vals.astype(np.int64))
            keys = [float(v) for v in uniq]
        else:
            uniq, c = np.unique(vals, return_inverse=True)
            c = c.ravel()
            keys = [float(v) for v in uniq]
        if nan.any():
            codes[~nan] = c
            codes[nan] = len(keys)
            keys.append(None)
        else:
            codes[:] = c
        return codes, keys
    if kind == "b":
        codes, uniq = _int_codes(arr.astype(np.int8))
        return codes, [bool(v) for v in uniq]
    if kind in "USM":
        uniq, inv = np.unique(arr, return_inverse=True)
        if kind == "M":  # as datetimes (nanosecond values would come back as ints)
            uniq = uniq.astype("datetime64[us]")
        remap, keys = _merge_uniques(uniq.tolist())
        return remap[inv.ravel()], keys
    values = arr.tolist()
    return _generic_codes(values, set(map(type, values)))


def _generic_codes(values: list, kinds: set) -> tuple[np.ndarray, list]:
    if not values:
        return np.zeros(0, dtype=np.intp), []
    if bool in kinds or np.bool_ in kinds:
        # True == 1 for a dict: keep true/false apart from the numbers
        values = [("\0bool", bool(v)) if isinstance(v, (bool, np.bool_)) else v for v in values]
    index: dict = {}
    try:
        raw = np.fromiter((index.setdefault(v, len(index)) for v in values), dtype=np.intp,
                          count=len(values))
    except TypeError:
        bad = next(v for v in values if not _hashable(v))
        raise ModelError("group keys must be numbers, text, dates, true/false or blank; got "
                         f"{type(bad).__name__}", ModelErrorKind.DATA) from None
    uniques = [v[1] if isinstance(v, tuple) and len(v) == 2 and v[0] == "\0bool" else v
               for v in index]
    remap, keys = _merge_uniques(uniques)
    return remap[raw], keys


def _hashable(v) -> bool:
    try:
        hash(v)
    except TypeError:
        return False
    return True


def group_order(codes: np.ndarray, n_groups: int) -> tuple[np.ndarray | None, np.ndarray]:
    """Stable argsort of group codes 0..n_groups-1 (None when they are sorted already) and
    the count of each code.

    A counting sort: the conversion of a sparse matrix with one entry per row, (code, row
    number), from coordinate to compressed-row form, which lists each row's column numbers
    in order; several times faster than numpy's radix argsort."""
    if codes.size < 2 or np.all(codes[1:] >= codes[:-1]):
        return None, np.bincount(codes, minlength=n_groups)
    n = codes.size
    small = max(n, n_groups) < 2**31  # 32-bit indices: no conversions inside
    itype = np.int32 if small else np.intp
    mat = sparse.coo_array((np.ones(n, dtype=np.int8),
                            (codes.astype(itype, copy=False), np.arange(n, dtype=itype))),
                           shape=(n_groups, n)).tocsr()
    if not mat.has_sorted_indices:
        mat.sort_indices()
    return mat.indices.astype(np.intp, copy=False), np.diff(mat.indptr).astype(np.intp)

