//! Property-based fuzzing of every reader of outside files: arbitrary input
//! and random mutations (byte changes, truncation, dropped or repeated
//! lines) of valid files must give `Ok` or a clean `Err`, never a panic.
//!
//! Case counts are set by `LAPSE_FUZZ_CASES` (default 400 per reader; the
//! longer campaign in the closing notes used 20 000). Coverage-guided
//! targets for cargo-fuzz (nightly toolchain) are kept in `fuzz/`.

mod common;
use common::*;

use std::path::Path;

use proptest::prelude::*;
use proptest::test_runner::{Config, TestRunner};

fn cases() -> u32 {
    std::env::var("LAPSE_FUZZ_CASES").ok().and_then(|v| v.parse().ok()).unwrap_or(400)
}

/// A mutation of a seed: (kind, position, byte/length).
fn mutate(seed: &[u8], ops: &[(u8, usize, u8)]) -> Vec<u8> {
    let mut v = seed.to_vec();
    for &(kind, pos, b) in ops {
        if v.is_empty() {
            v.push(b);
            continue;
        }
        let i = pos % v.len();
        match kind % 5 {
            0 => v[i] = b,       // change a byte
            1 => v.truncate(i),  // truncate
            2 => v.insert(i, b), // insert a byte
            3 => {
                // drop the line containing i
                let start = v[..i].iter().rposition(|c| *c == b'\n').map(|p| p + 1).unwrap_or(0);
                let end = v[i..].iter().position(|c| *c == b'\n').map(|p| i + p + 1).unwrap_or(v.len());
                v.drain(start..end);
            }
            _ => {
                // repeat the line containing i
                let start = v[..i].iter().rposition(|c| *c == b'\n').map(|p| p + 1).unwrap_or(0);
                let end = v[i..].iter().position(|c| *c == b'\n').map(|p| i + p + 1).unwrap_or(v.len());
                let line = v[start..end].to_vec();
                v.splice(end..end, line);
            }
        }
    }
    v
}

fn fuzz_bytes(name: &str, seed: &[u8], check: impl Fn(&[u8])) {
    let mut runner = TestRunner::new(Config { cases: cases(), failure_persistence: None, ..Config::default() });
    let strategy = prop_oneof![
        3 => proptest::collection::vec((any::<u8>(), any::<usize>(), any::<u8>()), 1..8).prop_map(|ops| (true, ops, Vec::new())),
        1 => proptest::collection::vec(any::<u8>(), 0..512).prop_map(|raw| (false, Vec::new(), raw)),
    ];
    let ran = std::cell::Cell::new(0u32);
    runner
        .run(&strategy, |(mutated, ops, raw)| {
            let input = if mutated { mutate(seed, &ops) } else { raw };
            check(&input);
            ran.set(ran.get() + 1);
            Ok(())
        })
        .unwrap_or_else(|e| panic!("{name}: {e}"));
    assert!(ran.get() >= cases(), "{name}: only {} cases ran", ran.get());
    eprintln!("{name}: {} cases, no panic", ran.get());
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

#[test]
fn pipeline_toml() {
    for p in ["pipelines/pulsar_demo.toml", "pipelines/tracking_demo.toml", "pipelines/timescales_demo.toml"] {
        let seed = std::fs::read(root().join(p)).unwrap();
        fuzz_bytes(p, &seed, |b| {
            if let Ok(f) = lapse::pipeline::PipelineFile::from_text(text(b), Path::new("fuzz.toml")) {
                let _ = f.parse::<lapse::kinds::pulsar::PulsarPipeline>();
                let _ = f.parse::<lapse::kinds::tracking::TrackingPipeline>();
                let _ = f.parse::<lapse::kinds::timescales::TimescalesPipeline>();
            }
        });
    }
}

#[test]
fn station_catalogue() {
    let seed = std::fs::read(root().join("data/demo/stations.toml")).unwrap();
    fuzz_bytes("stations", &seed, |b| {
        let _ = lapse::earth::StationCatalog::parse(&text(b), Path::new("fuzz.toml"));
    });
}

#[test]
fn clock_tables() {
    let seed = std::fs::read(root().join("data/demo/clock/FALCON-RT__GPS.csv")).unwrap();
    fuzz_bytes("clock", &seed[..2000.min(seed.len())], |b| {
        if let Ok(t) = lapse::pulsar::clock::ClockTable::parse(&text(b), Path::new("fuzz.csv")) {
            let _ = lapse::pulsar::clock::chain_at(&[t], 58_700.3, true);
        }
    });
}

#[test]
fn eop_text() {
    let finals = std::fs::read_to_string(root().join("data/finals2000A.all")).unwrap();
    let seed: String = finals.lines().skip(17_000).take(40).map(|l| format!("{l}\n")).collect();
    fuzz_bytes("finals2000A", seed.as_bytes(), |b| {
        let _ = lapse::earth::EopTable::parse(&text(b), Path::new("fuzz.all"));
    });
    let c04 = std::fs::read_to_string(root().join("data/eopc04.1962-now")).unwrap();
    let seed: String = c04.lines().take(12).chain(c04.lines().skip(20_000).take(30)).map(|l| format!("{l}\n")).collect();
    fuzz_bytes("C04", seed.as_bytes(), |b| {
        if let Ok(t) = lapse::earth::EopTable::parse(&text(b), Path::new("fuzz.c04")) {
            let ts = lapse::time::TimeScales::builtin();
            let (a, _) = t.span_mjd();
            if let Ok(e) = ts.epoch_from_mjd(lapse::time::TimeScale::Utc, a.max(41_317) + 1, 0.5) {
                let _ = t.at_utc(ts.leap_seconds(), &e);
            }
        }
    });
}

#[test]
fn leap_second_file() {
    let seed = std::fs::read(root().join("data/Leap_Second.dat")).unwrap();
    fuzz_bytes("Leap_Second.dat", &seed, |b| {
        if let Ok(t) = lapse::time::LeapSecondTable::parse(&text(b), Path::new("fuzz.dat")) {
            let _ = t.utc_day_of_tai(58_000 * 86_400 * 1_000_000_000_000_000);
            let _ = t.utc_day_length_s(57_753);
        }
    });
}

#[test]
fn oem_text() {
    let seed = b"CCSDS_OEM_VERS = 2.0
CREATION_DATE = 2026-12-01T00:00:00
ORIGINATOR = LAPSE TEST
META_START
OBJECT_NAME = TEST CRAFT
OBJECT_ID = 2026-999A
CENTER_NAME = SUN
REF_FRAME = ICRF
TIME_SYSTEM = UTC
START_TIME = 2020-01-01T12:00:00
STOP_TIME = 2020-001T12:03:00
INTERPOLATION = HERMITE
INTERPOLATION_DEGREE = 3
META_STOP
2020-01-01T12:00:00.000 100.0 0 0 2.0 0 0
2020-01-01T12:01:00.000 256.0 0 0 3.2 0 0
COVARIANCE_START
EPOCH = 2020-01-01T12:00:00
COVARIANCE_STOP
2020-01-01T12:02:00.000 484.0 0 0 4.4 0 0
2020-01-01T12:03:00.000 784.0 0 0 5.6 0 0
";
    let ts = lapse::time::TimeScales::builtin();
    fuzz_bytes("OEM", seed, |b| {
        if let Ok(k) = lapse::ephemeris::oem::parse_oem(&text(b), Path::new("fuzz.oem"), -5, &ts) {
            for s in &k.segments {
                let _ = s.evaluate(&lapse::ephemeris::TdbSeconds::new(s.start_s.floor() as i64, 0.5));
            }
        }
    });
}

#[test]
fn spk_bytes() {
    for f in ["data/demo/lapse1.bsp", "tests/fixtures/spice_type9.bsp"] {
        let seed = std::fs::read(root().join(f)).unwrap();
        fuzz_bytes(f, &seed, |b| {
            if let Ok(k) = lapse::ephemeris::SpkKernel::parse(b, Path::new("fuzz.bsp")) {
                for s in &k.segments {
                    let mid = 0.5 * (s.start_s + s.end_s);
                    if mid.is_finite() && mid.abs() < 1e12 {
                        let _ = s.evaluate(&lapse::ephemeris::TdbSeconds::new(mid.floor() as i64, mid - mid.floor()));
                    }
                }
            }
        });
    }
}

#[test]
fn parquet_bytes() {
    let seed = std::fs::read(root().join("data/demo/epochs.parquet")).unwrap();
    let dir = std::env::temp_dir().join(format!("lapse-fuzz-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let counter = std::sync::atomic::AtomicUsize::new(0);
    fuzz_bytes("parquet", &seed, |b| {
        let p = dir.join(format!("f{}.parquet", counter.fetch_add(1, std::sync::atomic::Ordering::Relaxed) % 8));
        std::fs::write(&p, b).unwrap();
        let _ = lapse::io::read_parquet(&p);
        let _ = lapse::io::read_parquet_metadata(&p);
    });
}

#[test]
fn parquet_readers_whole_sliced_and_streamed() {
    // Mutations of a pulsar input through every Parquet reader a run uses:
    // whole-file reads, row counts, slices (streamed partitions), the
    // kernel's sliced scan (ids, typed columns, facts) and one batch.
    let seed = std::fs::read(root().join("data/demo/pulsar_toas.parquet")).unwrap();
    let dir = std::env::temp_dir().join(format!("lapse-fuzz-slices-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let file = lapse::pipeline::PipelineFile::read(&root().join("pipelines/pulsar_demo.toml")).unwrap();
    let engine = std::sync::Mutex::new(lapse::commands::engine::BatchEngine::from_file(file.clone()).unwrap());
    let kind = lapse::kinds::load(&file).unwrap();
    let counter = std::sync::atomic::AtomicUsize::new(0);
    fuzz_bytes("parquet slices", &seed, |b| {
        let p = dir.join(format!("s{}.parquet", counter.fetch_add(1, std::sync::atomic::Ordering::Relaxed) % 8));
        std::fs::write(&p, b).unwrap();
        if let Ok(n) = lapse::pipeline::table::parquet_rows(&p) {
            for at in [0, n / 3, n.saturating_sub(1)] {
                let _ = lapse::pipeline::table::read_parquet_slice(&p, at, 97, None);
            }
        }
        let _ = lapse::pipeline::preflight::scan_file(kind.as_ref(), &p);
        if let Ok(df) = lapse::io::read_parquet(&p) {
            let _ = engine.lock().unwrap().process(&df, &p);
        }
    });
}
