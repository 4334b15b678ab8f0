"""lapse from Python: run a pipeline on Arrow record batches.

    import pyarrow.parquet as pq, lapse
    out = lapse.process(pq.read_table("arrivals.parquet"), "pipelines/pulsar_demo.toml")

``process`` returns exactly the table ``lapse run`` writes for an input file
holding the same rows (same columns, same values bit for bit). A batch is a
partition: where the pipeline removes the weighted mean of the residuals it
is removed over the batch, as ``lapse run`` does per partition file.

Shared inputs (kernels, Earth orientation, stations, clocks) load once per
process and pipeline file. The GIL is released while lapse computes, on
``lapse.threads()`` threads (``RAYON_NUM_THREADS``, else all cores).

Results must be validated independently before operational use; local
mission rules and licensed practice take precedence.
"""

from ._lapse import ArrowBatch, LapseError, __version__, load, source_revision, threads
from . import _lapse

__all__ = ["process", "process_with_rejects", "load", "threads", "LapseError", "ArrowBatch", "__version__", "source_revision"]


def _as_batch(data):
    """A pyarrow Table (any chunking) becomes one record batch; anything else
    with ``__arrow_c_array__`` passes through untouched (zero copy)."""
    try:
        import pyarrow as pa
    except ImportError:  # pragma: no cover - pyarrow is a dependency
        return data
    if isinstance(data, pa.Table):
        t = data.combine_chunks()
        cols = [c.chunk(0) if c.num_chunks else pa.array([], type=c.type) for c in t.columns]
        return pa.RecordBatch.from_arrays(cols, schema=t.schema)
    return data


def _to_pyarrow(batch):
    import pyarrow as pa

    return pa.record_batch(batch)


def process_with_rejects(data, pipeline, source=None):
    """Runs ``pipeline`` (a path) on ``data`` (a record batch or table);
    returns ``(output, rejects)`` as pyarrow RecordBatches. ``source`` names
    the batch in error messages. Raises ``LapseError`` with the CLI's message
    for a malformed batch (missing column, wrong type, duplicate obs_id)."""
    out, rej = _lapse.process(_as_batch(data), str(pipeline), None if source is None else str(source))
    return _to_pyarrow(out), _to_pyarrow(rej)


def process(data, pipeline, source=None):
    """Runs ``pipeline`` on ``data`` and returns the output RecordBatch (the
    rejected rows are dropped; see ``process_with_rejects``)."""
    return process_with_rejects(data, pipeline, source)[0]
