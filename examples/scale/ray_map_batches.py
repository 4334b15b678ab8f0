"""Ray: run a lapse pipeline with Dataset.map_batches (pyarrow batches,
tasks), one block per input file, and compare with the single-process CLI.

    pip install "ray[data]" pyarrow <lapse wheel>
    LAPSE_BIN=target/release/lapse python examples/scale/ray_map_batches.py

Each input file becomes one block and `batch_size=None` hands each block to
lapse whole, so pipelines that remove the weighted mean of the residuals
per partition give what `lapse run` gives per file. Use the task form (a
function): the actor form deadlocked on this 2-CPU machine. Shared inputs
load once per Ray worker process.
"""

import sys
import tempfile
import time
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "tests/scale"))
from common import ROOT, canonical, digest, partitioned_cli_run, read_outputs  # noqa: E402


def main():
    import ray

    pipeline = str(ROOT / "pipelines/pulsar_demo.toml")
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        files = partitioned_cli_run(pipeline, 4, 1, d)

        t0 = time.perf_counter()
        ray.init(num_cpus=2, include_dashboard=False, log_to_driver=False)
        print(f"Ray {ray.__version__} runtime up in {time.perf_counter() - t0:.1f} s")

        def run(batch: pa.Table) -> pa.Table:
            import lapse  # in the Ray worker

            return pa.Table.from_batches([lapse.process(batch, pipeline)])

        # One block per file; each block is one batch.
        ds = ray.data.from_arrow([pq.read_table(f) for f in files])
        t1 = time.perf_counter()
        result = pa.concat_tables(ray.get(ds.map_batches(run, batch_format="pyarrow", batch_size=None, zero_copy_batch=True).to_arrow_refs()))
        print(f"map_batches over {len(files)} blocks: {result.num_rows} rows in {time.perf_counter() - t1:.1f} s")
        ray.shutdown()

        want = pa.concat_tables(read_outputs(d / "cli").values())
        a, b = canonical([result]), canonical([want])
        print(f"Ray result sha256 {digest(a)}, CLI {digest(b)}: {'IDENTICAL' if a == b else 'DIFFERENT'}")
        return 0 if a == b else 1


if __name__ == "__main__":
    sys.exit(main())
