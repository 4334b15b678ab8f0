"""Cost of the Python binding next to the CLI, in one run (not a test).

    LAPSE_BIN=target/release/lapse python benches/binding.py [ROWS]

Makes ROWS pulsar rows (copies of the demo arrival times with unique ids),
then times (median of repeats, wall clock, this machine):
  * the binding's import → export round trip (no compute): its fixed cost;
  * lapse.process on the batch (all delays) = the binding's per-row time;
  * `lapse run` on the same rows from a Parquet file (the CLI's per-row time,
    including Parquet read/write, preflight and provenance).
Needs the venv of tests/scale/run (pyarrow, the lapse wheel).
"""

import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests/scale"))
from common import LAPSE, ROOT, pipeline_input  # noqa: E402

import lapse  # noqa: E402


def timed(fn, repeats):
    ts = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return statistics.median(ts)


def main():
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else 100_000
    pipeline = ROOT / "pipelines/pulsar_demo.toml"
    demo = pq.read_table(pipeline_input(pipeline))
    copies = -(-rows // demo.num_rows)
    ids = demo["obs_id"].cast(pa.string())
    t = pa.concat_tables([demo.set_column(0, "obs_id", pc.binary_join_element_wise(ids, pa.scalar(f"-{k}"), "")) for k in range(copies)]).slice(0, rows)
    with tempfile.TemporaryDirectory() as d:
        f = Path(d) / "rows.parquet"
        pq.write_table(t, f)
        batch = pq.read_table(f).combine_chunks().to_batches()[0]  # string views, as the CLI's files give them
        lapse.load(pipeline)
        rt = timed(lambda: pa.record_batch(lapse._lapse.roundtrip(batch)), 50)
        proc = timed(lambda: lapse.process(batch, pipeline), 5)
        out = Path(d) / "out.parquet"
        run = timed(lambda: subprocess.run([LAPSE, "run", str(pipeline), "--input", str(f), "--output", str(out), "--no-plots", "--quiet"], check=True), 3)
    print(f"rows {rows}, threads {lapse.threads()}")
    print(f"| step | wall | per row |")
    print(f"|---|---:|---:|")
    print(f"| binding round trip (import + export, no compute) | {rt * 1e6:.0f} µs | {rt / rows * 1e9:.2f} ns |")
    print(f"| lapse.process (all delays) | {proc * 1e3:.1f} ms | {proc / rows * 1e6:.2f} µs |")
    print(f"| lapse run (CLI, Parquet in/out, preflight) | {run * 1e3:.1f} ms | {run / rows * 1e6:.2f} µs |")
    print(f"round trip / process = {rt / proc:.2e}; binding rows/s {rows / proc:,.0f}, CLI rows/s {rows / run:,.0f}")


if __name__ == "__main__":
    main()
