"""The Python binding gives what the CLI writes, byte for byte, raises the
CLI's messages for malformed batches, releases the GIL and honours
RAYON_NUM_THREADS. Run by tests/scale/run (after the wheel is installed)."""

import os
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

import lapse
from common import ROOT, canonical, cli, digest, pipeline_input

PIPELINES = sorted((ROOT / "pipelines").glob("*.toml"))


def test_binding_equals_cli_for_every_demo_pipeline(tmp):
    for p in PIPELINES:
        out = tmp / f"{p.stem}.parquet"
        cli("run", p, "--output", out, "--no-plots", "--quiet")
        inp = pipeline_input(p)
        o, r = lapse.process_with_rejects(pq.read_table(inp), p, source=inp)
        want_o, want_r = pq.read_table(out), pq.read_table(out.with_name(f"{p.stem}.rejects.parquet"))
        # Same order, same schema, same bits (no sorting).
        assert canonical([o], sort=False) == canonical([want_o], sort=False), p.stem
        assert canonical([r], sort=False) == canonical([want_r], sort=False), f"{p.stem} rejects"
        print(f"  {p.stem}: {o.num_rows} rows, {r.num_rows} rejected, sha256 {digest(canonical([o], sort=False))} = CLI")


def cli_error(pipeline, table, tmp, name):
    bad = tmp / f"{name}.parquet"
    pq.write_table(table, bad)
    r = cli("run", pipeline, "--input", bad, "--output", tmp / f"{name}-out.parquet", "--no-plots", "--quiet", check=False)
    assert r.returncode == 2, (name, r.returncode, r.stderr)
    return bad, r.stderr


def test_malformed_batches_raise_the_cli_message(tmp):
    p = ROOT / "pipelines/pulsar_demo.toml"
    t = pq.read_table(pipeline_input(p))
    i = t.schema.get_field_index("freq_mhz")
    cases = {
        "missing-column": t.drop_columns(["freq_mhz"]),
        "wrong-type": t.set_column(i, "freq_mhz", pc.cast(t["freq_mhz"], pa.string())),
        "duplicate-id": pa.concat_tables([t.slice(0, 3), t.slice(0, 1)]),
    }
    for name, bad_table in cases.items():
        bad, stderr = cli_error(p, bad_table, tmp, name)
        try:
            lapse.process(bad_table, p, source=bad)
        except lapse.LapseError as e:
            msg = str(e)
            assert msg and msg in stderr, f"{name}: binding said {msg!r}, CLI said {stderr!r}"
            print(f"  {name}: LapseError {msg!r} (CLI: same text)")
        else:
            raise AssertionError(f"{name}: no exception")
    for not_a_batch in (42, "text", pa.array([1, 2, 3])):
        try:
            lapse.process(not_a_batch, p)
        except (TypeError, lapse.LapseError) as e:
            print(f"  {type(not_a_batch).__name__}: {type(e).__name__}: {e}")
        else:
            raise AssertionError(f"{not_a_batch!r}: no exception")
    try:
        lapse.process(t, tmp / "no-such-pipeline.toml")
    except lapse.LapseError as e:
        print(f"  missing pipeline: LapseError {e}")
    # The process is still healthy and the engine still loaded once.
    loads = lapse._lapse.engine_loads()
    assert lapse.process(t, p).num_rows == t.num_rows
    assert lapse._lapse.engine_loads() == loads


def bigger(table, copies):
    parts = []
    for k in range(copies):
        parts.append(table.set_column(0, "obs_id", pc.binary_join_element_wise(table["obs_id"].cast(pa.string()), pa.scalar(f"-{k}"), "")))
    return pa.concat_tables(parts)


def test_gil_is_released_while_computing():
    p = ROOT / "pipelines/pulsar_demo.toml"
    lapse.load(p)
    base = pq.read_table(pipeline_input(p))
    # A batch long enough to watch another thread run during it: grown until
    # it takes over 0.1 s (lapse gets faster; the machine's speed varies).
    for copies in (60, 120, 240, 480, 960):
        t = bigger(base, copies)
        ticks = []
        stop = threading.Event()

        def ticker():
            while not stop.is_set():
                ticks.append(time.perf_counter())
                time.sleep(0.001)

        th = threading.Thread(target=ticker)
        th.start()
        time.sleep(0.01)
        t0 = time.perf_counter()
        out = lapse.process(t, p)
        t1 = time.perf_counter()
        stop.set()
        th.join()
        if t1 - t0 > 0.1:
            break
    inside = [x for x in ticks if t0 + 0.02 < x < t1 - 0.02]
    assert out.num_rows == t.num_rows
    assert t1 - t0 > 0.06, "batch too small to test the GIL"
    assert len(inside) >= 5, f"the GIL was held: {len(inside)} ticks in {t1 - t0:.3f} s"
    print(f"  {t.num_rows} rows in {t1 - t0:.3f} s; another Python thread ran {len(inside)} times meanwhile")


def test_rayon_num_threads_is_honoured():
    for n in ("1", "2"):
        env = dict(os.environ, RAYON_NUM_THREADS=n)
        r = subprocess.run([sys.executable, "-c", "import lapse; print(lapse.threads())"], env=env, capture_output=True, text=True, check=True)
        assert r.stdout.strip() == n, r
    print("  RAYON_NUM_THREADS=1 → 1 thread, =2 → 2 threads")


def test_rejected_rows_match_the_cli(tmp):
    p = ROOT / "pipelines/pulsar_demo.toml"
    t = pq.read_table(pipeline_input(p))
    n = t.num_rows
    sigma = pa.array([-1.0 if k < 5 else None if k < 7 else v for k, v in enumerate(t["sigma_us"].to_pylist())], pa.float64())
    site = pa.array(["NOWHERE" if 7 <= k < 10 else v for k, v in enumerate(t["site"].to_pylist())], t.schema.field("site").type)
    t = t.set_column(t.schema.get_field_index("sigma_us"), "sigma_us", sigma).set_column(t.schema.get_field_index("site"), "site", site)
    inp = tmp / "with-bad-rows.parquet"
    pq.write_table(t, inp)
    out = tmp / "with-bad-rows-out.parquet"
    cli("run", p, "--input", inp, "--output", out, "--no-plots", "--quiet")
    o, r = lapse.process_with_rejects(pq.read_table(inp), p, source=inp)
    assert r.num_rows == 10 and o.num_rows == n - 10, (o.num_rows, r.num_rows)
    assert canonical([o], sort=False) == canonical([pq.read_table(out)], sort=False)
    assert canonical([r], sort=False) == canonical([pq.read_table(tmp / "with-bad-rows-out.rejects.parquet")], sort=False)
    print(f"  {r.num_rows} rejected rows with reasons, output and rejects = CLI")


def test_roundtrip_returns_the_batch_unchanged():
    t = pq.read_table(pipeline_input(ROOT / "pipelines/pulsar_demo.toml"))
    back = pa.record_batch(lapse._lapse.roundtrip(lapse._as_batch(t)))
    assert canonical([back], sort=False) == canonical([t], sort=False)
    print("  import → export round trip returns the batch unchanged")


if __name__ == "__main__":
    failures = 0
    with tempfile.TemporaryDirectory() as d:
        for name, fn in list(globals().items()):
            if name.startswith("test_"):
                print(name)
                try:
                    fn(Path(d)) if fn.__code__.co_argcount else fn()
                except Exception as e:  # report every failure, then fail
                    failures += 1
                    print(f"FAILED {name}: {type(e).__name__}: {e}")
    sys.exit(1 if failures else 0)
