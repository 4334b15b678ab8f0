//! Nightly operations: preflight, partitioned and resumable runs, plots.

mod common;
use common::*;

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

use polars::prelude::*;

/// The pulsar demo pipeline with absolute data paths, reading `input`
/// (file, folder or glob) and writing `output`; weighted-mean removal off so
/// that partitioning cannot change residuals.
fn pulsar_pipeline(dir: &Path, input: &str, output: &str) -> PathBuf {
    let data = root().join("data").display().to_string();
    let text = std::fs::read_to_string(root().join("pipelines/pulsar_demo.toml"))
        .unwrap()
        .replace("\"../data", &format!("\"{data}"))
        .replace(&format!("{data}/demo/pulsar_toas.parquet"), input)
        .replace("../out/pulsar_demo.parquet", output)
        .replace("subtract_weighted_mean = true", "subtract_weighted_mean = false");
    let p = dir.join("pipeline.toml");
    std::fs::write(&p, text).unwrap();
    p
}

/// Splits the demo arrival times, repeated `copies` times with new ids and
/// slightly shifted times, into `parts` partition files.
fn make_partitions(dir: &Path, parts: usize, copies: usize) -> DataFrame {
    let base = read(&root().join("data/demo/pulsar_toas.parquet"));
    let mut frames = Vec::new();
    for c in 0..copies {
        let mut df = base.clone();
        let ids: Vec<String> = df.column("obs_id").unwrap().str().unwrap().iter().map(|s| format!("{}-c{c}", s.unwrap())).collect();
        let frac: Vec<f64> = df.column("arrival_mjd_frac").unwrap().f64().unwrap().iter().map(|f| (f.unwrap() + 1e-4 * c as f64) % 1.0).collect();
        df.with_column(Column::new("obs_id".into(), ids)).unwrap();
        df.with_column(Column::new("arrival_mjd_frac".into(), frac)).unwrap();
        frames.push(df);
    }
    let mut all = frames[0].clone();
    for f in &frames[1..] {
        all.vstack_mut(f).unwrap();
    }
    let n = all.height();
    let per = n.div_ceil(parts);
    std::fs::create_dir_all(dir.join("in")).unwrap();
    for k in 0..parts {
        let mut part = all.slice((k * per) as i64, per.min(n - k * per));
        write(&dir.join("in").join(format!("night-{k:02}.parquet")), &mut part);
    }
    all
}

#[test]
fn preflight_exit_codes_and_messages() {
    // Clean demos: exit 0.
    for p in ["pipelines/pulsar_demo.toml", "pipelines/tracking_demo.toml"] {
        let o = lapse(&["check", root().join(p).to_str().unwrap()]);
        assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stdout));
    }
    let d = tmpdir("preflight");
    // Problems: unknown site, epochs past the leap-second table and EOP.
    let input = d.join("toas.parquet");
    let mut df = df!("obs_id" => ["a", "b"], "site" => ["FALCON-RT", "ATLANTIS"], "arrival_mjd_day" => [59_000i64, 61_700], "arrival_mjd_frac" => [0.3, 0.3], "freq_mhz" => [1400.0, 1400.0], "sigma_us" => [1.0, 1.0]).unwrap();
    write(&input, &mut df);
    let p = pulsar_pipeline(&d, &input.display().to_string(), &d.join("o.parquet").display().to_string());
    let o = lapse(&["check", p.to_str().unwrap()]);
    let out = String::from_utf8_lossy(&o.stdout);
    assert_eq!(o.status.code(), Some(1), "{out}");
    assert!(out.contains("unknown site: ATLANTIS (1 rows)"), "{out}");
    assert!(out.contains("leap-second table"), "{out}");
    assert!(out.contains("clock table") && out.contains("PROBLEM"), "{out}");
    // `lapse run` does the same checks, warns, and still accounts for every row.
    let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stderr).contains("preflight: unknown site"));
    // Unusable: a missing column (exit 2, nothing written).
    let mut df = df!("obs_id" => ["a"], "site" => ["FALCON-RT"], "arrival_mjd_day" => [59_000i64], "arrival_mjd_frac" => [0.3]).unwrap();
    write(&input, &mut df);
    let _ = std::fs::remove_file(d.join("o.parquet"));
    let o = lapse(&["check", p.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stdout).contains("missing column 'freq_mhz'"));
    let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("missing column 'freq_mhz'"));
    assert!(!d.join("o.parquet").exists());
    // Unusable: a pipeline that does not parse.
    std::fs::write(d.join("bad.toml"), "kind = \"pulsar\"\n[input\n").unwrap();
    assert_eq!(lapse(&["check", d.join("bad.toml").to_str().unwrap()]).status.code(), Some(2));
}

#[test]
fn partitioned_run_equals_single_file_run_and_skips_up_to_date_partitions() {
    let d = tmpdir("partitions");
    let all = make_partitions(&d, 4, 1);
    let single_in = d.join("all.parquet");
    write(&single_in, &mut all.clone());
    let p_single = pulsar_pipeline(&d, &single_in.display().to_string(), &d.join("single.parquet").display().to_string());
    assert_eq!(lapse(&["run", "--max-rejected-fraction", "1", p_single.to_str().unwrap(), "-q", "--no-plots"]).status.code(), Some(0));
    let p_part = pulsar_pipeline(&d, &d.join("in").display().to_string(), &d.join("out").display().to_string());
    std::fs::rename(&p_part, d.join("part.toml")).unwrap();
    let p_part = d.join("part.toml");
    let o = lapse(&["run", "--max-rejected-fraction", "1", p_part.to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stdout).contains("partitions 4 processed, 0 up to date"));
    // Same residuals, row for row.
    let single = read(&d.join("single.parquet"));
    let mut parts = Vec::new();
    for k in 0..4 {
        parts.push(read(&d.join("out").join(format!("night-{k:02}.parquet"))));
    }
    let mut joined = parts[0].clone();
    for p in &parts[1..] {
        joined.vstack_mut(p).unwrap();
    }
    assert_eq!(column_bits(&joined), column_bits(&single));
    // A rerun skips every partition; a changed pipeline redoes them all.
    let o = lapse(&["run", "--max-rejected-fraction", "1", p_part.to_str().unwrap(), "--no-plots"]);
    assert!(String::from_utf8_lossy(&o.stdout).contains("partitions 0 processed, 4 up to date"), "{}", String::from_utf8_lossy(&o.stdout));
    let text = std::fs::read_to_string(&p_part).unwrap().replace("ppn_gamma = 1.0", "ppn_gamma = 1.0 # changed");
    std::fs::write(&p_part, text).unwrap();
    let o = lapse(&["run", "--max-rejected-fraction", "1", p_part.to_str().unwrap(), "--no-plots"]);
    assert!(String::from_utf8_lossy(&o.stdout).contains("partitions 4 processed, 0 up to date"));
    // A changed partition is redone alone.
    let mut first = read(&d.join("in/night-00.parquet"));
    let s: Vec<f64> = first.column("sigma_us").unwrap().f64().unwrap().iter().map(|v| v.unwrap() * 1.5).collect();
    first.with_column(Column::new("sigma_us".into(), s)).unwrap();
    write(&d.join("in/night-00.parquet"), &mut first);
    let o = lapse(&["run", "--max-rejected-fraction", "1", p_part.to_str().unwrap(), "--no-plots"]);
    assert!(String::from_utf8_lossy(&o.stdout).contains("partitions 1 processed, 3 up to date"));
}

#[test]
fn a_run_leaves_other_writers_partial_files_alone() {
    // One cluster task per partition writes into a shared output folder:
    // a task starting must not delete the files another task is still
    // writing (this happened on the Slurm array: a task removed every
    // `*.partial` in the folder and its neighbour's rename failed). It
    // removes only the stale partial files of its own output.
    let d = tmpdir("partials");
    make_partitions(&d, 2, 1);
    let out = d.join("out");
    std::fs::create_dir_all(&out).unwrap();
    let neighbour = lapse::pipeline::partial_paths(&out.join("night-01.parquet"));
    let own = lapse::pipeline::partial_paths(&out.join("night-00.parquet"));
    for f in neighbour.iter().chain(own.iter()) {
        std::fs::write(f, b"in progress").unwrap();
    }
    // Old-style names (x.parquet.partial) of this output are stale too.
    std::fs::write(out.join("night-00.parquet.partial"), b"old").unwrap();
    let p = pulsar_pipeline(&d, &d.join("in/night-00.parquet").display().to_string(), &out.join("night-00.parquet").display().to_string());
    let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap(), "-q", "--no-plots"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    for f in &neighbour {
        assert_eq!(std::fs::read(f).unwrap(), b"in progress", "{} was touched", f.display());
    }
    for f in own.iter().chain([&out.join("night-00.parquet.partial")]) {
        assert!(!f.exists(), "stale {} left behind", f.display());
    }
    assert!(out.join("night-00.parquet").exists() && out.join("night-00.rejects.parquet").exists());
}

#[test]
fn model_cache_cold_warm_or_off_gives_the_golden_bits() {
    // The X, Y, s and TDB − TT grid nodes come from the model cache when it
    // has them: cold (computed and written), warm (read back) and disabled,
    // the demo outputs must be the golden ones bit for bit.
    let d = tmpdir("model-cache");
    let cache = d.join("cache");
    for name in ["pulsar_demo", "tracking_demo"] {
        let pipeline = root().join(format!("pipelines/{name}.toml"));
        for (run, dir) in [("cold", cache.to_str().unwrap()), ("warm", cache.to_str().unwrap()), ("off", "off")] {
            let out = d.join(format!("{name}-{run}.parquet"));
            let o = Command::new(env!("CARGO_BIN_EXE_lapse"))
                .args(["run", pipeline.to_str().unwrap(), "--output", out.to_str().unwrap(), "-q", "--no-plots"])
                .env("LAPSE_CACHE_DIR", dir)
                .output()
                .unwrap();
            assert_eq!(o.status.code(), Some(0), "{name} {run}: {}", String::from_utf8_lossy(&o.stderr));
            assert_eq!(column_bits(&read(&out)), column_bits(&read(&root().join(format!("tests/golden/{name}.parquet")))), "{name}, cache {run}");
        }
    }
    let blocks = std::fs::read_dir(&cache).unwrap().flatten().filter(|e| e.path().extension().is_some_and(|x| x == "bin")).count();
    assert!(blocks >= 2 * 60, "the 2019–2025 pulsar span fills ≥ 60 blocks of 32 days per model; {blocks} files");
}

#[test]
fn killed_run_resumes_to_the_same_outputs() {
    let d = tmpdir("kill");
    make_partitions(&d, 8, 6);
    let p = pulsar_pipeline(&d, &d.join("in/night-*.parquet").display().to_string(), &d.join("out").display().to_string());
    // Uninterrupted reference run into another folder.
    let p_ref = d.join("ref.toml");
    std::fs::write(&p_ref, std::fs::read_to_string(&p).unwrap().replace(&d.join("out").display().to_string(), &d.join("ref").display().to_string())).unwrap();
    assert_eq!(lapse(&["run", "--max-rejected-fraction", "1", p_ref.to_str().unwrap(), "-q", "--no-plots"]).status.code(), Some(0));
    // Start, kill as soon as the first partition is complete.
    let mut child = Command::new(env!("CARGO_BIN_EXE_lapse")).args(["run", p.to_str().unwrap(), "-q", "--no-plots", "--threads", "1"]).stdout(Stdio::null()).stderr(Stdio::null()).spawn().unwrap();
    let started = std::time::Instant::now();
    loop {
        let done = std::fs::read_dir(d.join("out"))
            .map(|r| {
                r.flatten()
                    .filter(|e| e.path().extension().is_some_and(|x| x == "parquet") && !e.path().to_string_lossy().contains("rejects") && !e.file_name().to_string_lossy().starts_with('.'))
                    .count()
            })
            .unwrap_or(0);
        if done >= 1 || started.elapsed().as_secs() > 60 {
            break;
        }
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
    child.kill().unwrap();
    let _ = child.wait();
    let finished_before = std::fs::read_dir(d.join("out"))
        .unwrap()
        .flatten()
        .filter(|e| e.path().extension().is_some_and(|x| x == "parquet") && !e.path().to_string_lossy().contains("rejects") && !e.file_name().to_string_lossy().starts_with('.'))
        .count();
    assert!(finished_before < 8, "the run finished before it could be killed; make the partitions larger");
    // Every output present after the kill is complete and readable
    // (hidden staged files of the killed run are not outputs).
    for e in std::fs::read_dir(d.join("out")).unwrap().flatten() {
        if e.path().extension().is_some_and(|x| x == "parquet") && !e.file_name().to_string_lossy().starts_with('.') {
            assert!(ParquetReader::new(std::fs::File::open(e.path()).unwrap()).finish().is_ok(), "{}", e.path().display());
        }
    }
    // Resume.
    let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains(&format!("{} up to date", finished_before)), "{stdout}");
    // Byte for byte in the data, metadata equal but for the start time and paths.
    for k in 0..8 {
        let name = format!("night-{k:02}.parquet");
        let (a, b) = (read(&d.join("out").join(&name)), read(&d.join("ref").join(&name)));
        assert_eq!(column_bits(&a), column_bits(&b), "{name}");
        let md = |p: &Path| -> Vec<(String, String)> {
            lapse::io::read_parquet_metadata(p)
                .unwrap()
                .into_iter()
                .filter(|(k, _)| k != "lapse.run.started_utc" && k != "lapse.run.id" && !k.ends_with(".path") && k != "lapse.pipeline.text" && k != "lapse.pipeline.sha256")
                .collect()
        };
        assert_eq!(md(&d.join("out").join(&name)), md(&d.join("ref").join(&name)));
    }
    assert!(std::fs::read_dir(d.join("out")).unwrap().flatten().all(|e| !e.path().to_string_lossy().contains(".partial")), "no partial files remain");
}

#[test]
fn plots_are_written_and_are_real_images() {
    let d = tmpdir("plots");
    let out = d.join("demo.parquet");
    let o = lapse(&["run", "--max-rejected-fraction", "1", root().join("pipelines/tracking_demo.toml").to_str().unwrap(), "--output", out.to_str().unwrap(), "--plots", "png,svg"]);
    assert_eq!(o.status.code(), Some(0));
    for kind in ["doppler_2way", "doppler_3way", "light_time_2way"] {
        for suffix in ["", "_normalised"] {
            let png = d.join(format!("demo.residuals_{kind}{suffix}.png"));
            let bytes = std::fs::read(&png).unwrap_or_else(|e| panic!("{}: {e}", png.display()));
            assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n", "PNG signature");
            assert!(bytes.len() > 20_000, "{} is only {} bytes", png.display(), bytes.len());
            let svg = std::fs::read_to_string(d.join(format!("demo.residuals_{kind}{suffix}.svg"))).unwrap();
            assert!(svg.contains("<svg") && svg.contains("residual"), "SVG with labels");
        }
    }
    let svg = std::fs::read_to_string(d.join("demo.residuals_doppler_2way.svg")).unwrap();
    assert!(svg.contains("residual (mHz)") && svg.contains("KESTREL-1"));
    // --no-plots writes none.
    let d2 = tmpdir("noplots");
    let out2 = d2.join("demo.parquet");
    assert_eq!(lapse(&["run", "--max-rejected-fraction", "1", root().join("pipelines/tracking_demo.toml").to_str().unwrap(), "--output", out2.to_str().unwrap(), "--no-plots"]).status.code(), Some(0));
    assert!(std::fs::read_dir(&d2).unwrap().flatten().all(|e| e.path().extension().is_none_or(|x| x != "png")));
}

#[test]
fn streamed_partitions_equal_in_memory_ones() {
    // Force streaming on the demo (threshold 100 rows, slices of 333): the
    // output must equal the in-memory golden bit for bit, and the metadata
    // must equal that of an in-memory run apart from the start time.
    let d = tmpdir("stream");
    let demo = root().join("pipelines/pulsar_demo.toml");
    let (a, b) = (d.join("mem.parquet"), d.join("stream.parquet"));
    assert_eq!(lapse(&["run", "--max-rejected-fraction", "1", demo.to_str().unwrap(), "--output", a.to_str().unwrap(), "-q"]).status.code(), Some(0));
    let o = Command::new(env!("CARGO_BIN_EXE_lapse"))
        .args(["run", demo.to_str().unwrap(), "--output", b.to_str().unwrap(), "-q"])
        .env("LAPSE_STREAM_ROWS", "100")
        .env("LAPSE_STREAM_SLICE", "333")
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(column_bits(&read(&b)), column_bits(&read(&root().join("tests/golden/pulsar_demo.parquet"))));
    assert_eq!(column_bits(&read(&d.join("stream.rejects.parquet"))), column_bits(&read(&d.join("mem.rejects.parquet"))));
    let md = |p: &Path| -> Vec<(String, String)> { lapse::io::read_parquet_metadata(p).unwrap().into_iter().filter(|(k, _)| k != "lapse.run.started_utc" && k != "lapse.run.id").collect() };
    assert_eq!(md(&a), md(&b));
    assert!(d.join("stream.residuals.png").exists());
    assert!(std::fs::read_dir(&d).unwrap().flatten().all(|e| !e.path().to_string_lossy().contains(".partial")));
    // An input in small row groups: slices cross them (columns arrive in
    // several chunks); streamed still equals in memory.
    let mut df = read(&root().join("data/demo/pulsar_toas.parquet"));
    let groups = d.join("groups.parquet");
    ParquetWriter::new(std::fs::File::create(&groups).unwrap()).with_row_group_size(Some(200)).finish(&mut df).unwrap();
    let (gm, gs) = (d.join("groups-mem.parquet"), d.join("groups-stream.parquet"));
    assert_eq!(
        lapse(&["run", "--max-rejected-fraction", "1", demo.to_str().unwrap(), "--input", groups.to_str().unwrap(), "--output", gm.to_str().unwrap(), "-q", "--no-plots"]).status.code(),
        Some(0)
    );
    let o = Command::new(env!("CARGO_BIN_EXE_lapse"))
        .args(["run", demo.to_str().unwrap(), "--input", groups.to_str().unwrap(), "--output", gs.to_str().unwrap(), "-q", "--no-plots"])
        .env("LAPSE_STREAM_ROWS", "100")
        .env("LAPSE_STREAM_SLICE", "333")
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(column_bits(&read(&gs)), column_bits(&read(&gm)));
    // A duplicate id across slices is found.
    let mut ids: Vec<String> = df.column("obs_id").unwrap().str().unwrap().iter().map(|s| s.unwrap().to_string()).collect();
    ids[1200] = ids[3].clone();
    df.with_column(Column::new("obs_id".into(), ids)).unwrap();
    let dup = d.join("dup.parquet");
    write(&dup, &mut df);
    let p = pulsar_pipeline(&d, &dup.display().to_string(), &d.join("dupout.parquet").display().to_string());
    let o = Command::new(env!("CARGO_BIN_EXE_lapse")).args(["run", p.to_str().unwrap()]).env("LAPSE_STREAM_ROWS", "100").env("LAPSE_STREAM_SLICE", "333").output().unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("duplicate obs_id"), "{}", String::from_utf8_lossy(&o.stderr));
}
