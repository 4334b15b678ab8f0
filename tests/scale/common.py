"""Helpers of the scale-out tests: the built CLI, partitioned demo inputs,
and a byte-exact comparison of result tables."""

import hashlib
import os
import subprocess
import tomllib
from pathlib import Path

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

ROOT = Path(__file__).resolve().parents[2]
LAPSE = os.environ.get("LAPSE_BIN", str(ROOT / "target/release/lapse"))


def cli(*args, check=True):
    """Runs the lapse binary; returns the CompletedProcess."""
    r = subprocess.run([LAPSE, *map(str, args)], capture_output=True, text=True)
    if check and r.returncode != 0:
        raise AssertionError(f"lapse {' '.join(map(str, args))} exited {r.returncode}: {r.stderr}")
    return r


def pipeline_input(pipeline):
    """The [input] path of a pipeline file, resolved."""
    p = Path(pipeline)
    return (p.parent / tomllib.loads(p.read_text())["input"]["path"]).resolve()


def plain_strings(schema):
    """The schema with every string type (view, 32- or 64-bit offsets) as
    large_string: pyarrow cannot sort or take string views yet, and Spark's
    Arrow does not take them (same text)."""
    text = (pa.types.is_string_view, pa.types.is_string, pa.types.is_large_string)
    return pa.schema([pa.field(f.name, pa.large_string() if any(t(f.type) for t in text) else f.type) for f in schema])


def canonical(tables, key="obs_id", sort=True):
    """Result tables → one byte string: concatenated, sorted by `key`,
    schema metadata (provenance) dropped, one chunk, Arrow IPC stream of the
    schema and, per column, the null mask and the values with nulls set to
    zero (the bytes under a null are unspecified in Arrow). Equal bytes mean
    equal columns, types, nulls and values, bit for bit."""
    t = pa.concat_tables([pa.table(x) if not isinstance(x, pa.Table) else x for x in tables])
    t = t.replace_schema_metadata(None)
    schema = t.schema
    # Plain strings for sorting (same text; the types are compared through `schema`).
    t = t.cast(plain_strings(schema))
    if sort and t.num_rows:
        t = t.sort_by(key)
    t = t.combine_chunks()
    cols, names = [], []
    for name, c in zip(t.column_names, t.columns):
        zero = "" if pa.types.is_large_string(c.type) else False if pa.types.is_boolean(c.type) else 0
        cols += [pc.is_null(c), pc.fill_null(c, pa.scalar(zero).cast(c.type))]
        names += [f"{name}.null", name]
    flat = pa.table(cols, names=names)
    sink = pa.BufferOutputStream()
    sink.write(schema.serialize())
    with pa.ipc.new_stream(sink, flat.schema) as w:
        w.write_table(flat)
    return sink.getvalue().to_pybytes()


def digest(b):
    return hashlib.sha256(b).hexdigest()[:16]


def read_outputs(folder):
    """Output tables of a partitioned run (rejects files left out), by name."""
    return {p.name: pq.read_table(p) for p in sorted(Path(folder).glob("*.parquet")) if not p.name.endswith(".rejects.parquet")}


def read_rejects(folder):
    return {p.name: pq.read_table(p) for p in sorted(Path(folder).glob("*.rejects.parquet"))}


def split(table, parts, folder, shuffle_seed=None):
    """Writes `table` as `parts` partition files part-<k>.parquet (rows in
    contiguous slices, optionally shuffled first); returns their paths."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    if shuffle_seed is not None:
        import numpy as np

        idx = np.random.default_rng(shuffle_seed).permutation(table.num_rows)
        table = table.cast(plain_strings(table.schema))  # `take` needs plain strings
        table = table.take(pa.array(idx))
    n = table.num_rows
    paths = []
    for k in range(parts):
        a, b = k * n // parts, (k + 1) * n // parts
        p = folder / f"part-{k}.parquet"
        pq.write_table(table.slice(a, b - a), p)
        paths.append(p)
    return paths


def partitioned_cli_run(pipeline, parts, seed, folder):
    """Splits a pipeline's demo input into `parts` files under folder/in and
    runs the CLI on them into folder/cli (the single-process reference);
    returns the input files."""
    folder = Path(folder)
    files = split(pq.read_table(pipeline_input(pipeline)), parts, folder / "in", seed)
    cli("run", pipeline, "--input", folder / "in", "--output", folder / "cli", "--no-plots", "--quiet")
    return files
