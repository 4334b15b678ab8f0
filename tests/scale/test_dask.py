"""Dask: a LocalCluster with 2 worker processes maps the binding over a
partitioned Parquet dataset (one task per file, shared inputs read from the
repository path by each worker), writes partitioned output, and the result
equals the single-process CLI run on the same partitions byte for byte
(after sorting by obs_id). Run by tests/scale/run."""

import os
import sys
import tempfile
import time
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from common import ROOT, canonical, cli, digest, pipeline_input, read_outputs, read_rejects, split


def run_partition(path, pipeline, out_dir):
    """One Dask task: one input file → its output and rejects files (the
    names `lapse run` gives a partition)."""
    import lapse  # imported in the worker; shared inputs cached per process

    t = pq.read_table(path)
    out, rejects = lapse.process_with_rejects(t, pipeline, source=path)
    stem = Path(path).stem
    pq.write_table(pa.Table.from_batches([out]), Path(out_dir) / f"{stem}.parquet")
    pq.write_table(pa.Table.from_batches([rejects]), Path(out_dir) / f"{stem}.rejects.parquet")
    return {"file": Path(path).name, "rows": out.num_rows, "rejected": rejects.num_rows, "pid": os.getpid(), "threads": lapse.threads(), "loads": lapse._lapse.engine_loads()}


def main():
    os.environ["RAYON_NUM_THREADS"] = "1"  # 2 workers × 1 thread on 2 cores (inherited by the workers)
    from dask.distributed import Client, LocalCluster

    cases = [
        # (pipeline, partitions, shuffle seed): the pulsar pipeline removes the
        # weighted mean per partition, as lapse run does per file.
        (ROOT / "pipelines/pulsar_demo.toml", 4, 1),
        (ROOT / "pipelines/tracking_demo.toml", 3, 2),
        (ROOT / "pipelines/timescales_demo.toml", 2, None),
    ]
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        t0 = time.perf_counter()
        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster, Client(cluster) as client:
            print(f"LocalCluster up in {time.perf_counter() - t0:.1f} s: {len(client.scheduler_info()['workers'])} worker processes")
            for pipeline, parts, seed in cases:
                name = pipeline.stem
                files = split(pq.read_table(pipeline_input(pipeline)), parts, d / name / "in", seed)
                dask_out = d / name / "dask"
                dask_out.mkdir(parents=True)
                t1 = time.perf_counter()
                futures = client.map(run_partition, [str(f) for f in files], pipeline=str(pipeline), out_dir=str(dask_out), pure=False)
                info = client.gather(futures)
                t_dask = time.perf_counter() - t1
                # The single-process CLI run on the same partitions.
                cli_out = d / name / "cli"
                if name.startswith("timescales"):
                    # timescales pipelines take one file: one CLI run per file.
                    cli_out.mkdir(parents=True)
                    for f in files:
                        cli("run", pipeline, "--input", f, "--output", cli_out / f.name, "--quiet")
                else:
                    cli("run", pipeline, "--input", d / name / "in", "--output", cli_out, "--no-plots", "--quiet")
                got, want = read_outputs(dask_out), read_outputs(cli_out)
                assert sorted(got) == sorted(want), (sorted(got), sorted(want))
                a, b = canonical(got.values()), canonical(want.values())
                assert a == b, f"{name}: Dask output differs from the CLI run"
                ra, rb = canonical(read_rejects(dask_out).values()), canonical(read_rejects(cli_out).values())
                assert ra == rb, f"{name}: rejects differ"
                for k in got:  # and partition by partition
                    assert canonical([got[k]]) == canonical([want[k]]), f"{name}/{k}"
                pids = sorted({i["pid"] for i in info})
                assert all(i["threads"] == 1 for i in info)
                # Shared inputs load once per worker process and pipeline.
                assert all(i["loads"] <= len(cases) for i in info), info
                rows = sum(i["rows"] for i in info)
                print(f"  {name}: {len(files)} partitions, {rows} rows on {len(pids)} worker process(es) in {t_dask:.2f} s; sorted output sha256 {digest(a)} = single-process CLI")
                if name.startswith("tracking"):
                    # No per-partition statistic: also equal to one CLI run on the unpartitioned file.
                    whole = d / name / "whole.parquet"
                    cli("run", pipeline, "--output", whole, "--no-plots", "--quiet")
                    assert canonical([pq.read_table(whole)]) == a, "tracking: Dask ≠ unpartitioned CLI run"
                    print(f"  {name}: also = the CLI run on the unpartitioned input")
            # A malformed batch raises LapseError in the client (the CLI's
            # message) and the worker survives: the same processes answer next.
            bad = d / "bad.parquet"
            pq.write_table(pq.read_table(pipeline_input(cases[0][0])).drop_columns(["freq_mhz"]), bad)
            pids_before = set(client.run(os.getpid).values())
            try:
                client.submit(run_partition, str(bad), str(cases[0][0]), str(d), pure=False).result()
            except Exception as e:  # the worker's exception, re-raised here
                assert type(e).__name__ == "LapseError" and "missing column 'freq_mhz'" in str(e), repr(e)
                print(f"  malformed batch on a worker: {type(e).__name__}: {e}")
            else:
                raise AssertionError("malformed batch: no exception")
            assert set(client.run(os.getpid).values()) == pids_before, "a worker process was replaced"
            ok = client.submit(run_partition, str(files[0]), str(cases[-1][0]), str(d / cases[-1][0].stem / "dask"), pure=False).result()
            assert ok["pid"] in pids_before
            print("  workers still alive (same processes) and answering")
    print("dask: OK")


if __name__ == "__main__":
    main()
