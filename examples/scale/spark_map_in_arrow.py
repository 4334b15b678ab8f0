"""Spark: run a lapse pipeline with DataFrame.mapInArrow, one Spark
partition per input file, and compare with the single-process CLI.

    pip install pyspark pyarrow <lapse wheel>      # plus a Java runtime
    LAPSE_BIN=target/release/lapse python examples/scale/spark_map_in_arrow.py

Each Spark partition holds one input file (a union of one-file reads), and
the function hands the whole partition to lapse as one batch, so pipelines
that remove the weighted mean of the residuals per partition give what
`lapse run` gives per file. Shared inputs load once per Python worker.
Spark's Arrow does not take string views: those columns come back as plain
strings (same text).
"""

import functools
import sys
import tempfile
import time
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "tests/scale"))
from common import ROOT, canonical, digest, partitioned_cli_run, plain_strings, read_outputs  # noqa: E402


def main():
    import os

    os.environ.setdefault("PYSPARK_PYTHON", sys.executable)  # workers use this Python (with lapse)
    from pyspark.sql import SparkSession
    from pyspark.sql.pandas.types import from_arrow_schema

    pipeline = str(ROOT / "pipelines/pulsar_demo.toml")
    with tempfile.TemporaryDirectory() as d:
        d = Path(d)
        files = partitioned_cli_run(pipeline, 4, 1, d)

        t0 = time.perf_counter()
        spark = SparkSession.builder.master("local[2]").appName("lapse").config("spark.ui.enabled", "false").getOrCreate()
        print(f"Spark {spark.version} session up in {time.perf_counter() - t0:.1f} s")

        import lapse

        # The output schema, from lapse itself on one file (driver side).
        schema = plain_strings(lapse.process(pq.read_table(files[0]), pipeline).schema)

        def run(batches):
            import lapse  # in the Python worker

            t = pa.Table.from_batches(list(batches))
            if t.num_rows:
                out = pa.Table.from_batches([lapse.process(t, pipeline)])
                yield from out.cast(schema).to_batches()

        # One Spark partition per file.
        df = functools.reduce(lambda a, b: a.union(b), [spark.read.parquet(str(f)) for f in files])
        t1 = time.perf_counter()
        result = df.mapInArrow(run, from_arrow_schema(schema)).toArrow()
        print(f"mapInArrow over {df.rdd.getNumPartitions()} partitions: {result.num_rows} rows in {time.perf_counter() - t1:.1f} s")
        spark.stop()

        want = pa.concat_tables(read_outputs(d / "cli").values())
        want = want.replace_schema_metadata(None).cast(plain_strings(want.schema))
        got = result.replace_schema_metadata(None).cast(plain_strings(result.schema))
        a, b = canonical([got]), canonical([want])
        print(f"Spark result sha256 {digest(a)}, CLI {digest(b)}: {'IDENTICAL' if a == b else 'DIFFERENT'}")
        return 0 if a == b else 1


if __name__ == "__main__":
    sys.exit(main())
