"""The Dask engine gives the same table as the single-machine ``fit_groups``: a LocalCluster
with 2 worker processes on loopback, Parquet and CSV inputs, mixed keys with blanks, a
scheduler given by address. The data are invented here with fixed seeds."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("dask.dataframe", reason="dask not installed: pip install '.[dask]' (checkout)")
distributed = pytest.importorskip(
    "distributed", reason="distributed not installed: pip install '.[dask]' (checkout)")
pd = pytest.importorskip("pandas")
pytest.importorskip("pyarrow", reason="pyarrow not installed: pip install '.[dask]' (checkout)")

from xlbridge import ModelError, fit_groups  # noqa: E402
from xlbridge.groups_dask import fit_groups_dask  # noqa: E402


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None,
                                       silence_logs=50)
    cl = distributed.Client(cluster)
    try:
        yield cl
    finally:
        cl.close()
        cluster.close()


def _frame(seed=0, n_groups=300):
    """Invented: price against lot size per product family, some blank family cells, a few
    missing prices, groups of 1 to 60 rows."""
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 60, n_groups)
    fam = np.repeat(np.array([f"fam {i:03d}" for i in range(n_groups)], dtype=object), sizes)
    n = len(fam)
    fam[rng.random(n) < 0.01] = None
    size = rng.uniform(1, 50, n)
    price = 20 + 3 * size - 0.02 * size**2 + rng.normal(0, 2, n)
    price[rng.random(n) < 0.02] = np.nan
    return pd.DataFrame({"family": fam, "price": price, "size": size,
                         "w": rng.uniform(0.5, 2, n)})


def _assert_same(a, b):
    assert a.groups == b.groups
    assert a.flags == b.flags and a.methods == b.methods
    np.testing.assert_array_equal(a.n_used, b.n_used)
    for name in ("estimates", "std_errors", "r2", "adj_r2", "rmse"):
        np.testing.assert_allclose(getattr(a, name), getattr(b, name), rtol=1e-13, atol=0,
                                   equal_nan=True)


def test_parquet_equals_local(client, tmp_path):
    df = _frame()
    path = tmp_path / "sales.parquet"
    df.to_parquet(path, row_group_size=2000)
    local = fit_groups(df["family"].to_numpy(), df["price"].to_numpy(), df["size"].to_numpy(),
                       2, names=["size"])
    got = fit_groups_dask(str(path), "family", "price", "size", 2, scheduler=client,
                          npartitions=3)
    _assert_same(got, local)
    assert None in got.groups and got.groups[-1] is None  # the blank group, last


def test_csv_by_scheduler_address_with_weights(client, tmp_path):
    df = _frame(1, 120)
    for i in range(3):
        df.iloc[i::3].to_csv(tmp_path / f"part{i}.csv", index=False)
    back = pd.concat([pd.read_csv(tmp_path / f"part{i}.csv") for i in range(3)])
    local = fit_groups(back["family"].to_numpy(), back["price"].to_numpy(),
                       back["size"].to_numpy(), "size, size^2", names=["size"],
                       weights=back["w"].to_numpy())
    got = fit_groups_dask(str(tmp_path / "part*.csv"), "family", "price", ["size"], "size, size^2",
                          weights_col="w", scheduler=client.scheduler.address)
    _assert_same(got, local)


def test_dataframe_input_and_missing_column(client):
    dd = pytest.importorskip("dask.dataframe")
    df = _frame(2, 50)
    ddf = dd.from_pandas(df, npartitions=4)
    local = fit_groups(df["family"].to_numpy(), df["price"].to_numpy(), df["size"].to_numpy(),
                       1, names=["size"])
    _assert_same(fit_groups_dask(ddf, "family", "price", "size", 1, scheduler=client), local)
    with pytest.raises(ModelError, match="column 'depth' not in the dataframe"):
        fit_groups_dask(ddf, "family", "price", "depth", 1, scheduler=client)
