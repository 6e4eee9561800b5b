"""Benchmark: memory of the Dask grouped fit is bounded by the partition size, not the dataset.

Writes Parquet datasets of 4, 16 and 64 partitions of the same size (invented data, fixed
seed: price against size, 300 rows per family, families spread over every file so the
shuffle has work to do; the one-row-per-family result, which the workers hold until it is
collected, stays small beside the data), runs ``fit_groups_dask`` on a fresh LocalCluster of
2 worker processes for each, and prints each worker's peak resident memory above its idle
level (after imports) next to the partition and dataset sizes. Bounded memory: the peak
levels off while the dataset grows 16x and ends several times larger than it. Dask's
shuffle buffers count too: their limits (``distributed.p2p.comm.buffer``, 1 GiB by default,
and ``distributed.p2p.storage.buffer``) are set to 64 and 32 MiB here, as one would on small
workers; the workers inherit them from this process.

Run by hand:  python tests/benchmarks/bench_dask_memory.py [rows_per_partition]
Needs the dask extra: python -m pip install ".[dask]" from a checkout.
"""

from __future__ import annotations

import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def _peak_kib() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux


def _warm() -> int:
    import pandas  # noqa: F401

    import xlbridge.groups_dask  # noqa: F401

    return _peak_kib()


def _write(folder: Path, n_parts: int, rows: int, seed: int) -> int:
    import pandas as pd

    rng = np.random.default_rng(seed)
    n_groups = n_parts * rows // 300
    nbytes = 0
    for i in range(n_parts):
        fam = rng.integers(0, n_groups, rows)
        size = rng.uniform(20, 400, rows)
        price = 35 + 0.9 * size - 0.0011 * size**2 + rng.normal(0, 6, rows)
        frame = pd.DataFrame({"family": fam, "price": price, "size": size})
        nbytes += int(frame.memory_usage(index=False).sum())
        frame.to_parquet(folder / f"part{i:03d}.parquet", index=False)
    return nbytes


def run(n_parts: int, rows: int, root: Path) -> dict:
    import dask
    from distributed import Client, LocalCluster

    from xlbridge.groups_dask import fit_groups_dask

    folder = root / f"data{n_parts}"
    folder.mkdir()
    data_bytes = _write(folder, n_parts, rows, seed=n_parts)
    buffers = {"distributed.p2p.comm.buffer": "64 MiB",
               "distributed.p2p.storage.buffer": "32 MiB"}
    with dask.config.set(buffers), LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
            dashboard_address=None, silence_logs=50, memory_limit="4GiB") as cluster, \
            Client(cluster) as client:
        idle = client.run(_warm)
        t = time.perf_counter()
        res = fit_groups_dask(str(folder), "family", "price", "size", 2, scheduler=client)
        elapsed = time.perf_counter() - t
        peak = client.run(_peak_kib)
    grow = [1024 * (peak[w] - idle[w]) for w in peak]
    return {"parts": n_parts, "rows": n_parts * rows, "data_bytes": data_bytes,
            "partition_bytes": data_bytes / n_parts, "groups": len(res),
            "fitted": res.methods.count("batched") + res.methods.count("single"),
            "seconds": elapsed, "worker_peak_growth": max(grow)}


def main() -> None:
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else 250_000
    mib = 2.0**20
    with tempfile.TemporaryDirectory() as tmp:
        results = [run(n, rows, Path(tmp)) for n in (4, 16, 64)]
    print(f"partitions of {rows} rows; 2 worker processes; peak resident memory per worker "
          "above its idle level")
    for r in results:
        print(f"  {r['parts']:3d} partitions, {r['rows']:>10,d} rows, dataset "
              f"{r['data_bytes'] / mib:7.1f} MiB (partition {r['partition_bytes'] / mib:5.1f} "
              f"MiB), {r['groups']:,d} groups ({r['fitted']:,d} fitted) in "
              f"{r['seconds']:5.1f} s: worker peak +{r['worker_peak_growth'] / mib:6.1f} MiB "
              f"= {r['worker_peak_growth'] / r['partition_bytes']:4.1f} partitions, "
              f"{r['worker_peak_growth'] / r['data_bytes']:5.2f} of the dataset")
    small, big = results[0], results[-1]
    print(f"  dataset x{big['data_bytes'] / small['data_bytes']:.0f} -> worker peak "
          f"x{big['worker_peak_growth'] / small['worker_peak_growth']:.2f}")


if __name__ == "__main__":
    main()
