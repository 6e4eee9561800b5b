"""Grouped fits over datasets larger than memory, with Dask (optional extra ``dask``).

The rows are shuffled so that every group lands whole in one partition; each partition is
fitted by the same batch engine as ``fit_groups`` (``xlbridge.engine.groups``), one task per
partition, and only the one-row-per-group results travel back. Memory per worker is bounded
by the partition size, not by the dataset size. Where the work runs is Dask's business: an
existing cluster (``scheduler="tcp://host:8786"`` or a ``distributed.Client``), a Client the
caller already started, or Dask's local default.
"""

from __future__ import annotations

import contextlib
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .engine import GroupsResult, ModelError, parse_model
from .engine.groups import finite_range, fit_groups, normalize_key

__all__ = ["fit_groups_dask", "read_dataset"]

_INSTALL = ("the dask engine needs Dask: from the xlbridge checkout, "
            "python -m pip install \".[dask]\" (dask[dataframe], distributed and pyarrow)")
_CSV_SUFFIXES = (".csv", ".txt", ".tsv")


def _dask():
    try:
        import dask
        import dask.dataframe as dd
    except ImportError:
        raise ModelError(_INSTALL) from None
    return dask, dd


def read_dataset(path: str | Path, columns: Sequence[str], *, blocksize: Any = "64MB",
                 **read_kwargs):
    """A dask DataFrame with ``columns`` of a Parquet file or folder, or of CSV files
    (``.csv``/``.txt``/``.tsv``, globs allowed). Raises ModelError naming a missing column."""
    _, dd = _dask()
    text = str(path)
    local = "://" not in text and not any(ch in text for ch in "*?[")
    if local and not Path(text).exists():
        raise ModelError(f"the dataset {text!r} does not exist; give a Parquet file or folder "
                         "or CSV files")
    name = text.lower().removesuffix(".gz")
    try:
        if name.endswith(_CSV_SUFFIXES):
            if name.endswith(".tsv"):
                read_kwargs.setdefault("sep", "\t")
            ddf = dd.read_csv(text, blocksize=blocksize, **read_kwargs)
        else:
            ddf = dd.read_parquet(text, **read_kwargs)
    except (OSError, ValueError) as exc:
        last = (str(exc).strip().splitlines() or [type(exc).__name__])[-1]
        raise ModelError(f"cannot read the dataset {text!r}: {last}") from None
    missing = [c for c in columns if c not in ddf.columns]
    if missing:
        raise ModelError(f"column {missing[0]!r} not found in {text}; columns are: "
                         f"{', '.join(map(str, ddf.columns))}")
    return ddf[list(columns)]


def _numbers(pdf, cols: list[str]) -> np.ndarray:
    """The columns as floats; a cell that is not a number becomes NaN (a dropped row)."""
    import pandas as pd

    return np.column_stack([pd.to_numeric(pdf[c], errors="coerce").to_numpy(dtype=float)
                            for c in cols]) if len(cols) else np.zeros((len(pdf), 0))


def _part_frame(spec_args: dict, group_col: str, y_col: str, x_cols: list[str],
                weights_col: str | None, x_range: tuple):
    """The task run on each partition: fit its groups, return one row per group."""
    import pandas as pd

    p = parse_model(spec_args["model"], len(x_cols), tuple(x_cols),
                    intercept=spec_args["intercept"]).n_params

    def run(pdf):
        num = _numbers(pdf, [y_col, *x_cols] + ([weights_col] if weights_col else []))
        res = fit_groups(
            pdf[group_col].to_numpy(), num[:, 0], num[:, 1:1 + len(x_cols)],
            spec_args["model"], intercept=spec_args["intercept"], level=spec_args["level"],
            names=x_cols, weights=num[:, -1] if weights_col else None, x_range=x_range)
        data: dict[str, Any] = {"key": pd.Series(list(res.groups), dtype=object),
                                "n_used": res.n_used.astype(np.int64),
                                "n_dropped": res.n_dropped.astype(np.int64)}
        for j in range(p):
            data[f"est_{j}"] = res.estimates[:, j]
            data[f"se_{j}"] = res.std_errors[:, j]
        data.update(r2=res.r2, adj_r2=res.adj_r2, rmse=res.rmse,
                    flag=pd.Series(list(res.flags), dtype=object),
                    method=pd.Series(list(res.methods), dtype=object))
        return pd.DataFrame(data)

    return run


def fit_groups_dask(
    path_or_ddf,
    group_col: str,
    y_col: str,
    x_cols: str | Sequence[str],
    model: int | str = 2,
    *,
    intercept: bool = True,
    level: float = 0.95,
    weights_col: str | None = None,
    scheduler: Any = None,
    npartitions: int | None = None,
    blocksize: Any = "64MB",
    read_kwargs: dict | None = None,
    connect_timeout: float = 30.0,
) -> GroupsResult:
    """``fit_groups`` over a Parquet/CSV dataset or a dask DataFrame, partitioned by group.

    ``scheduler``: None (a running ``distributed.Client`` if there is one, else Dask's local
    default), a scheduler address such as ``"tcp://10.0.0.5:8786"`` (connects for this call
    only), a ``distributed.Client``, or a Dask scheduler name ("threads", "processes",
    "synchronous"). ``npartitions``: partitions after the shuffle (default: as read).
    Cells that are not numbers (CSV text) count as dropped rows of their group.
    Returns the same GroupsResult as ``fit_groups`` on the whole dataset.
    """
    dask, _ = _dask()
    x_cols = [x_cols] if isinstance(x_cols, str) else list(x_cols)
    if not x_cols:
        raise ModelError("give at least one predictor column")
    parse_model(model, len(x_cols), tuple(x_cols), intercept=bool(intercept))
    if not isinstance(level, (int, float)) or isinstance(level, bool) or not 0 < level < 1:
        raise ModelError(f"level must be between 0 and 1 (e.g. 0.95); got {level!r}")
    cols = [group_col, y_col, *x_cols] + ([weights_col] if weights_col else [])
    if len(set(cols)) != len(cols):
        raise ModelError(f"the group, y, x and weights columns must differ: {', '.join(cols)}")
    if isinstance(path_or_ddf, (str, Path)):
        ddf = read_dataset(path_or_ddf, cols, blocksize=blocksize, **(read_kwargs or {}))
    else:
        missing = [c for c in cols if c not in path_or_ddf.columns]
        if missing:
            raise ModelError(f"column {missing[0]!r} not in the dataframe")
        ddf = path_or_ddf[cols]

    client = None
    if isinstance(scheduler, str) and "://" in scheduler:
        try:
            from distributed import Client
        except ImportError:
            raise ModelError(_INSTALL) from None
        try:
            client = Client(scheduler, timeout=connect_timeout)
        except (OSError, TimeoutError) as exc:
            raise ModelError(f"cannot reach the Dask scheduler at {scheduler}: {exc}; check "
                             "the address and that the cluster is running") from None
        scheduler = client
    try:
        use = (dask.config.set(scheduler=scheduler) if scheduler is not None
               else contextlib.nullcontext())
        with use:
            return _run(ddf, group_col, y_col, x_cols, weights_col, model,
                        bool(intercept), float(level), npartitions)
    finally:
        if client is not None:
            client.close()


def _run(ddf, group_col, y_col, x_cols, weights_col, model, intercept, level,
         npartitions) -> GroupsResult:
    import pandas as pd

    # pass 1: the range of each predictor over rows with finite numbers (extrapolation flag)
    num_cols = [y_col, *x_cols] + ([weights_col] if weights_col else [])

    def part_range(pdf):
        num = _numbers(pdf, num_cols)
        lo, hi = finite_range(num[:, 0], num[:, 1:1 + len(x_cols)],
                              num[:, -1] if weights_col else None)
        return pd.DataFrame([np.concatenate([lo, hi])],
                            columns=[f"lo{j}" for j in range(len(x_cols))]
                            + [f"hi{j}" for j in range(len(x_cols))])

    ranges = ddf.map_partitions(part_range, meta=part_range(ddf._meta)).compute()
    k = len(x_cols)
    x_range = (ranges.iloc[:, :k].min(axis=0).to_numpy(dtype=float),
               ranges.iloc[:, k:].max(axis=0).to_numpy(dtype=float))
    # pass 2: every group whole in one partition, fitted there
    shuffled = ddf.shuffle(on=group_col, npartitions=npartitions or ddf.npartitions)
    spec_args = {"model": model, "intercept": intercept, "level": level}
    run = _part_frame(spec_args, group_col, y_col, x_cols, weights_col, x_range)
    meta = run(ddf._meta)
    frame = shuffled.map_partitions(run, meta=meta).compute()
    if not isinstance(frame, pd.DataFrame):
        frame = pd.DataFrame(frame)
    return _result(frame, model, intercept, level, x_cols)


def _result(frame, model, intercept, level, x_cols) -> GroupsResult:
    spec = parse_model(model, len(x_cols), tuple(x_cols), intercept=intercept)
    p = spec.n_params
    keys = [normalize_key(k) for k in frame["key"].tolist()]
    part = GroupsResult(
        spec=spec, groups=tuple(keys), n_used=frame["n_used"].to_numpy(dtype=np.int64),
        n_dropped=frame["n_dropped"].to_numpy(dtype=np.int64),
        estimates=np.column_stack([frame[f"est_{j}"].to_numpy(dtype=float) for j in range(p)])
        if len(frame) else np.zeros((0, p)),
        std_errors=np.column_stack([frame[f"se_{j}"].to_numpy(dtype=float) for j in range(p)])
        if len(frame) else np.zeros((0, p)),
        r2=frame["r2"].to_numpy(dtype=float), adj_r2=frame["adj_r2"].to_numpy(dtype=float),
        rmse=frame["rmse"].to_numpy(dtype=float), flags=tuple(frame["flag"].tolist()),
        methods=tuple(frame["method"].tolist()), level=level)
    # groups arrive in partition order; put them in the documented group order
    return GroupsResult.combine([part])

