//! Nothing silently wrong: one regression test per item of the hardening
//! issue (bad inputs, unsafe writes, exit codes, messages). Each test names
//! the item it covers.

mod common;
use common::*;

use std::path::{Path, PathBuf};

use polars::prelude::*;

/// The pulsar demo pipeline with absolute paths, written into `dir`, with
/// `edit` applied to its text; input and output as given.
fn pulsar_pipeline(dir: &Path, input: &str, output: &str, edit: impl Fn(String) -> String) -> PathBuf {
    let text = std::fs::read_to_string(root().join("pipelines/pulsar_demo.toml")).unwrap();
    let text = text.replace("../", &format!("{}/", root().display()));
    let text = text.replace(&format!("path = \"{}/data/demo/pulsar_toas.parquet\"", root().display()), &format!("path = \"{input}\""));
    let text = text.replace(&format!("path = \"{}/out/pulsar_demo.parquet\"", root().display()), &format!("path = \"{output}\""));
    let p = dir.join("p.toml");
    std::fs::write(&p, edit(text)).unwrap();
    p
}

/// A small pulsar input: the demo's first rows.
fn demo_rows(n: usize) -> DataFrame {
    read(&root().join("data/demo/pulsar_toas.parquet")).head(Some(n))
}

fn text(o: &std::process::Output) -> String {
    format!("{}{}", String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr))
}

fn f64s(df: &DataFrame, c: &str) -> Vec<f64> {
    df.column(c).unwrap().f64().unwrap().iter().map(|v| v.unwrap()).collect()
}

fn strs(df: &DataFrame, c: &str) -> Vec<String> {
    df.column(c).unwrap().str().unwrap().iter().map(|v| v.unwrap_or("").to_string()).collect()
}

/// Item 1: a tiny σ (1e-170 µs, or subnormal) is rejected by its documented
/// range, and no statistic becomes NaN.
#[test]
fn item01_tiny_sigma_is_rejected_and_statistics_stay_finite() {
    let d = tmpdir("h01");
    let mut df = demo_rows(20);
    let mut s = f64s(&df, "sigma_us");
    s[3] = 1e-170;
    s[7] = f64::from_bits(1); // subnormal
    df.with_column(Column::new("sigma_us".into(), s)).unwrap();
    write(&d.join("in.parquet"), &mut df);
    let p = pulsar_pipeline(&d, &d.join("in.parquet").display().to_string(), &d.join("out.parquet").display().to_string(), |t| t);
    let o = lapse(&["run", p.to_str().unwrap(), "--no-plots", "--max-rejected-fraction", "1"]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let out = read(&d.join("out.parquet"));
    assert_eq!(out.height(), 18);
    assert!(f64s(&out, "residual_s").iter().all(|r| r.is_finite()), "no NaN residual");
    let rej = read(&d.join("out.rejects.parquet"));
    assert_eq!(strs(&rej, "reason_code"), ["invalid_value", "invalid_value"]);
    assert!(strs(&rej, "reason")[0].contains("outside"), "{:?}", strs(&rej, "reason"));
    assert!(!text(&o).contains("NaN"), "{}", text(&o));
}

/// Item 2: absurd pipeline numbers are refused with the key named; a
/// non-finite computed value would be a reject (checked in the unit tests of
/// the kinds' `finite`), never data.
#[test]
fn item02_absurd_pipeline_numbers_are_refused() {
    let d = tmpdir("h02");
    let mut df = demo_rows(5);
    write(&d.join("in.parquet"), &mut df);
    let (i, o) = (d.join("in.parquet").display().to_string(), d.join("out.parquet").display().to_string());
    for (from, to, key) in [
        ("epoch_mjd = 59215.0", "epoch_mjd = 1e15", "[spin] epoch_mjd"),
        ("derivatives = [-6.31e-16]", "derivatives = [1e300, 1e300]", "[spin] derivatives[0]"),
        ("ra_deg = 253.4127", "ra_deg = 1e308", "[source] ra_deg"),
        ("position_epoch_mjd = 58849.0", "position_epoch_mjd = -1e9", "[source] position_epoch_mjd"),
        ("measure_pc_cm3 = 41.27", "measure_pc_cm3 = -3.0", "[dispersion] measure_pc_cm3"),
        ("ppn_gamma = 1.0", "ppn_gamma = 1e9", "[corrections] ppn_gamma"),
    ] {
        let p = pulsar_pipeline(&d, &i, &o, |t| t.replace(from, to));
        for cmd in ["run", "check"] {
            let r = lapse(&[cmd, p.to_str().unwrap()]);
            assert_eq!(r.status.code(), Some(2), "{cmd} {to}: {}", text(&r));
            assert!(text(&r).contains(key) && text(&r).contains("valid range"), "{cmd} {to}: {}", text(&r));
        }
    }
    assert!(!d.join("out.parquet").exists());
}

/// Item 3: a float32 day fraction is refused with the column named, not widened.
#[test]
fn item03_float32_time_columns_are_refused() {
    let d = tmpdir("h03");
    let mut df = demo_rows(5);
    let f: Vec<f32> = f64s(&df, "arrival_mjd_frac").iter().map(|x| *x as f32).collect();
    df.with_column(Column::new("arrival_mjd_frac".into(), f)).unwrap();
    write(&d.join("in.parquet"), &mut df);
    let p = pulsar_pipeline(&d, &d.join("in.parquet").display().to_string(), &d.join("out.parquet").display().to_string(), |t| t);
    for cmd in ["run", "check"] {
        let o = lapse(&[cmd, p.to_str().unwrap()]);
        assert_eq!(o.status.code(), Some(2), "{}", text(&o));
        assert!(text(&o).contains("'arrival_mjd_frac'") && text(&o).contains("float32"), "{}", text(&o));
    }
}

/// Item 4: damaged but plausible Earth data is refused: an EOP file whose
/// last line is cut mid-field, a leap-second file missing its 2017 line, and
/// (library level) a leap-second table that disagrees with the EOP file's
/// UT1 − UTC jumps.
#[test]
fn item04_damaged_earth_data_is_refused() {
    let d = tmpdir("h04");
    let mut df = demo_rows(5);
    write(&d.join("in.parquet"), &mut df);
    let (i, o) = (d.join("in.parquet").display().to_string(), d.join("out.parquet").display().to_string());
    // EOP cut inside the UT1 − UTC field (columns 59–68) of its last valued line.
    let eop = std::fs::read_to_string(root().join("data/finals2000A.all")).unwrap();
    let lines: Vec<&str> = eop.lines().collect();
    let k = lines.iter().rposition(|l| l.len() >= 68 && !l[58..68].trim().is_empty()).unwrap();
    let mut cut = lines[..k].join("\n");
    cut.push('\n');
    cut.push_str(&lines[k][..63]);
    std::fs::write(d.join("cut.all"), cut).unwrap();
    let p = pulsar_pipeline(&d, &i, &o, |t| t.replace(&format!("{}/data/finals2000A.all", root().display()), &d.join("cut.all").display().to_string()));
    let r = lapse(&["check", p.to_str().unwrap()]);
    assert_eq!(r.status.code(), Some(2), "{}", text(&r));
    assert!(text(&r).contains(&format!("line {}", k + 1)) && text(&r).contains("columns 59–68"), "{}", text(&r));
    // A leap-second file without its 2017 line.
    let leap = std::fs::read_to_string(root().join("data/Leap_Second.dat")).unwrap();
    let no2017: String = leap.lines().filter(|l| !l.contains(" 2017 ")).map(|l| format!("{l}\n")).collect();
    assert!(no2017.len() < leap.len());
    std::fs::write(d.join("leap.dat"), &no2017).unwrap();
    let p = pulsar_pipeline(&d, &i, &o, |t| t.replace(&format!("{}/data/Leap_Second.dat", root().display()), &d.join("leap.dat").display().to_string()));
    for cmd in ["check", "run"] {
        let r = lapse(&[cmd, p.to_str().unwrap()]);
        assert_eq!(r.status.code(), Some(2), "{cmd}: {}", text(&r));
        assert!(text(&r).contains("disagrees with the built-in table") && text(&r).contains("57754"), "{cmd}: {}", text(&r));
    }
    let r = lapse(&["time", "2018-01-01T00:00:00", "--leap-file", d.join("leap.dat").to_str().unwrap()]);
    assert_eq!(r.status.code(), Some(2), "{}", text(&r));
    // The EOP cross-check alone: UT1 − UTC jumps on MJD 57754 without a step.
    let table = lapse::time::LeapSecondTable::parse(&no2017, Path::new("leap.dat")).unwrap();
    let eop = lapse::earth::EopTable::from_file(&root().join("data/finals2000A.all")).unwrap();
    let e = eop.check_leap_seconds(&table).unwrap_err().to_string();
    assert!(e.contains("MJD 57754") && e.contains("disagree"), "{e}");
    assert!(eop.check_leap_seconds(&lapse::time::LeapSecondTable::builtin()).is_ok());
}

/// Item 5: `lapse time` refuses epochs outside each model's stated range.
#[test]
fn item05_epochs_outside_the_models_are_refused() {
    for args in [vec!["time", "mjd:999999999999", "--to", "tdb"], vec!["time", "--extend-leaps", "mjd:1000000000", "--to", "tdb,tt"], vec!["time", "--from", "tt", "mjd:130000", "--to", "tdb"]] {
        let o = lapse(&args);
        assert_eq!(o.status.code(), Some(2), "{args:?}: {}", text(&o));
        assert!(text(&o).contains("outside") || text(&o).contains("leap-second window"), "{args:?}: {}", text(&o));
        assert!(!String::from_utf8_lossy(&o.stdout).contains("tdb "), "{args:?}: nothing printed for the refused epoch");
    }
    // Inside the range it still works.
    let o = lapse(&["time", "--from", "tt", "mjd:120000", "--to", "tdb"]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
}

/// Item 12: a run that rejects rows above `--max-rejected-fraction` (default
/// 0.1; all rows always) exits 3; `lapse check` exits 1 when rows would be
/// rejected for their values, for every kind, and takes `--input`.
#[test]
fn item12_exit_codes_tell_a_scheduler_about_rejects() {
    let d = tmpdir("h12");
    let mut df = demo_rows(10);
    let s: Vec<f64> = vec![-1.0; 10];
    df.with_column(Column::new("sigma_us".into(), s)).unwrap();
    write(&d.join("bad.parquet"), &mut df);
    let mut good = demo_rows(10);
    write(&d.join("good.parquet"), &mut good);
    let p = pulsar_pipeline(&d, &d.join("bad.parquet").display().to_string(), &d.join("out.parquet").display().to_string(), |t| t);
    let o = lapse(&["run", p.to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(3), "{}", text(&o));
    assert!(text(&o).contains("10 of 10 rows rejected"), "{}", text(&o));
    assert!(d.join("out.rejects.parquet").exists(), "everything is still written");
    let o = lapse(&["run", p.to_str().unwrap(), "--no-plots", "--max-rejected-fraction", "1"]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    let o = lapse(&["check", p.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("10 rows would be rejected") && text(&o).contains("invalid_value (10)"), "{}", text(&o));
    let o = lapse(&["check", p.to_str().unwrap(), "--input", d.join("good.parquet").to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
    // Timescales: check reads the input (a missing column is unusable, a bad fraction a problem).
    let mut t = df!("obs_id" => ["a", "b"], "mjd_day" => [60_000i64, 60_001], "mjd_frac" => [0.5, 1.5]).unwrap();
    write(&d.join("epochs.parquet"), &mut t);
    std::fs::write(d.join("ts.toml"), format!("kind = \"timescales\"\n[input]\npath = \"{}\"\n[output]\npath = \"{}\"\n", d.join("epochs.parquet").display(), d.join("ts.parquet").display())).unwrap();
    let o = lapse(&["check", d.join("ts.toml").to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("fraction_out_of_range (1)"), "{}", text(&o));
    let mut t = df!("obs_id" => ["a"], "mjd_day" => [60_000i64]).unwrap();
    write(&d.join("epochs.parquet"), &mut t);
    let o = lapse(&["check", d.join("ts.toml").to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("missing column 'mjd_frac'"), "{}", text(&o));
}

/// Two small partitions of demo rows in `dir/in`.
fn two_partitions(dir: &Path) {
    std::fs::create_dir_all(dir.join("in")).unwrap();
    let all = demo_rows(40);
    for k in 0..2 {
        let mut part = all.slice(20 * k as i64, 20);
        write(&dir.join("in").join(format!("night-{k:02}.parquet")), &mut part);
    }
}

fn sha(p: &Path) -> String {
    lapse::pipeline::sha256_hex(&std::fs::read(p).unwrap())
}

/// Item 6: an output that is the input (file, or the partition folder) is
/// refused before anything is read or written.
#[test]
fn item06_output_equal_to_input_is_refused() {
    let d = tmpdir("h06");
    let mut df = demo_rows(10);
    let input = d.join("in.parquet");
    write(&input, &mut df);
    let before = sha(&input);
    let p = pulsar_pipeline(&d, &input.display().to_string(), &d.join("out.parquet").display().to_string(), |t| t);
    // The same file by another spelling of its path.
    let alias = d.join(".").join("in.parquet");
    let o = lapse(&["run", p.to_str().unwrap(), "--output", alias.to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("would overwrite the input"), "{}", text(&o));
    assert_eq!(sha(&input), before, "input untouched");
    two_partitions(&d);
    let p = pulsar_pipeline(&d, &d.join("in").display().to_string(), &d.join("in").display().to_string(), |t| t);
    let o = lapse(&["run", p.to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("output folder is the input folder"), "{}", text(&o));
    assert_eq!(std::fs::read_dir(d.join("in")).unwrap().count(), 2, "nothing written into the input folder");
}

/// Item 7: a second run on the same output fails at once with a clear
/// message (advisory lock); temporary names are unique per run (unit test
/// `pipeline::commit`).
#[test]
fn item07_a_second_writer_of_the_same_output_fails_fast() {
    let d = tmpdir("h07");
    let mut df = demo_rows(10);
    write(&d.join("in.parquet"), &mut df);
    let out = d.join("out.parquet");
    let p = pulsar_pipeline(&d, &d.join("in.parquet").display().to_string(), &out.display().to_string(), |t| t);
    // Another writer holds the lock.
    let lock = std::fs::File::options().create(true).truncate(false).write(true).open(d.join(".out.parquet.lock")).unwrap();
    lock.try_lock().unwrap();
    let t0 = std::time::Instant::now();
    let o = lapse(&["run", p.to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("another lapse run is writing this output"), "{}", text(&o));
    assert!(t0.elapsed().as_secs() < 30, "fails fast");
    assert!(!out.exists());
    drop(lock);
    let o = lapse(&["run", p.to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o));
}

/// Items 8 and 9: the output, its rejects table and its plots are one unit —
/// a rejects table or a plot from another run (a kill between renames, a
/// truncated plot) makes the partition out of date; an output path that is
/// a folder is refused before computing.
#[test]
fn item08_09_output_rejects_and_plots_are_committed_as_a_unit() {
    let d = tmpdir("h08");
    two_partitions(&d);
    let run = |out: &str| {
        let p = pulsar_pipeline(&d, &d.join("in").display().to_string(), &d.join(out).display().to_string(), |t| t);
        let o = lapse(&["run", p.to_str().unwrap()]);
        assert_eq!(o.status.code(), Some(0), "{}", text(&o));
        String::from_utf8_lossy(&o.stdout).into_owned()
    };
    run("a");
    run("b");
    assert!(run("a").contains("partitions 0 processed, 2 up to date"));
    // The state a kill between the rejects rename and the output rename leaves.
    std::fs::copy(d.join("b/night-00.rejects.parquet"), d.join("a/night-00.rejects.parquet")).unwrap();
    assert!(run("a").contains("partitions 1 processed, 1 up to date"), "a foreign rejects table is redone");
    // A truncated plot.
    let png = d.join("a/night-01.residuals.png");
    let bytes = std::fs::read(&png).unwrap();
    std::fs::write(&png, &bytes[..bytes.len() / 2]).unwrap();
    assert!(run("a").contains("partitions 1 processed, 1 up to date"), "a damaged plot is redone");
    assert_eq!(std::fs::read(&png).unwrap(), bytes);
    assert!(std::fs::read_dir(d.join("a")).unwrap().flatten().all(|e| !e.file_name().to_string_lossy().contains(".partial")), "no staged file remains");
    // An output path that is an existing folder.
    std::fs::create_dir_all(d.join("taken.parquet")).unwrap();
    let mut df = demo_rows(5);
    write(&d.join("one.parquet"), &mut df);
    let p = pulsar_pipeline(&d, &d.join("one.parquet").display().to_string(), &d.join("taken.parquet").display().to_string(), |t| t);
    let o = lapse(&["run", p.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("output path is a folder"), "{}", text(&o));
    assert_eq!(std::fs::read_dir(d.join("taken.parquet")).unwrap().count(), 0);
    assert!(!d.join("taken.rejects.parquet").exists());
}

/// Item 10: two partitions with one stem are refused, naming both.
#[test]
fn item10_partitions_with_the_same_stem_are_refused() {
    let d = tmpdir("h10");
    std::fs::create_dir_all(d.join("in")).unwrap();
    let mut df = demo_rows(5);
    write(&d.join("in/night1.parquet"), &mut df);
    write(&d.join("in/night1.pq"), &mut df);
    let p = pulsar_pipeline(&d, &d.join("in/night1.*").display().to_string(), &d.join("out").display().to_string(), |t| t);
    let o = lapse(&["run", p.to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("same stem") && text(&o).contains("night1.parquet") && text(&o).contains("night1.pq"), "{}", text(&o));
    assert!(!d.join("out/night1.parquet").exists());
}

/// Item 13: on a terminal the progress bar is cleared before the summary is
/// printed, and labels its phase (run under a pseudo-terminal by `script`).
#[test]
fn item13_progress_bar_leaves_the_summary_intact() {
    if std::process::Command::new("script").arg("--version").output().is_err() {
        eprintln!("skipped: no `script` (util-linux) to make a terminal");
        return;
    }
    let d = tmpdir("h13");
    let out = d.join("out.parquet");
    let cmd = format!("{} run {} --output {} --no-plots", env!("CARGO_BIN_EXE_lapse"), root().join("pipelines/pulsar_demo.toml").display(), out.display());
    let o = std::process::Command::new("script").args(["-qec", &cmd, "/dev/null"]).env("LAPSE_PROGRESS_AFTER_MS", "0").env("COLUMNS", "160").output().unwrap();
    let raw = String::from_utf8_lossy(&o.stdout).into_owned();
    assert_eq!(o.status.code(), Some(0), "{raw}");
    // What a person sees: for each line, the text after its last carriage
    // return, without escape sequences.
    let strip = |l: &str| -> String {
        let l = l.rsplit('\r').find(|s| !s.trim().is_empty()).unwrap_or("");
        let mut s = String::new();
        let mut esc = false;
        for c in l.chars() {
            if esc {
                esc = !c.is_ascii_alphabetic();
            } else if c == '\u{1b}' {
                esc = true;
            } else {
                s.push(c);
            }
        }
        s
    };
    let screen: Vec<String> = raw.lines().map(strip).collect();
    for want in ["pipeline   ", "rows in    1340", "rows out   1340", "residuals: 1340 rows", "  site               rows  rejected  weighted RMS (ns)           χ²", "  FALCON-RT ", "  KESTREL-1 "] {
        assert!(screen.iter().any(|l| l.starts_with(want)), "no intact line starting {want:?} in:\n{}", screen.join("\n"));
    }
    assert!(!screen.iter().any(|l| l.starts_with("pipeline") && l.contains("rows/s")), "a bar left on the summary:\n{}", screen.join("\n"));
}

/// Item 14: `--threads` is capped at 4 × the cores.
#[test]
fn item14_threads_are_capped() {
    let o = lapse(&["run", root().join("pipelines/pulsar_demo.toml").to_str().unwrap(), "--threads", "100000"]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("--threads 100000: give 1 …"), "{}", text(&o));
    let o = lapse(&["run", root().join("pipelines/pulsar_demo.toml").to_str().unwrap(), "--threads", "0"]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
}

/// Item 15: messages a nightly job can trust.
#[test]
fn item15_messages() {
    let d = tmpdir("h15");
    let (i, o) = (d.join("in.parquet"), d.join("out.parquet"));
    // (a) an unusable partition is reported once by `run`.
    let mut df = demo_rows(5).drop("freq_mhz").unwrap();
    write(&i, &mut df);
    let p = pulsar_pipeline(&d, &i.display().to_string(), &o.display().to_string(), |t| t);
    let r = lapse(&["run", p.to_str().unwrap()]);
    assert_eq!(r.status.code(), Some(2));
    assert_eq!(text(&r).matches("missing column 'freq_mhz'").count(), 1, "{}", text(&r));
    // (b) a pipeline that does not load is not first called ok.
    let bad = d.join("bad.toml");
    std::fs::write(&bad, std::fs::read_to_string(&p).unwrap().replace("ra_deg = 253.4127", "ra_deg = 999.0")).unwrap();
    let r = lapse(&["check", bad.to_str().unwrap()]);
    assert_eq!(r.status.code(), Some(2));
    assert!(!text(&r).contains("ok       pipeline"), "{}", text(&r));
    // (c) an output folder that cannot be made is not "cannot read pipeline".
    let mut df = demo_rows(5);
    write(&i, &mut df);
    std::fs::write(d.join("afile"), b"x").unwrap();
    let under_file = d.join("afile/out.parquet");
    let r = lapse(&["run", p.to_str().unwrap(), "--output", under_file.to_str().unwrap(), "--no-plots"]);
    assert_eq!(r.status.code(), Some(2));
    assert!(!text(&r).contains("cannot read pipeline") && text(&r).contains("afile"), "{}", text(&r));
    // (d) a huge id is clipped in messages.
    let big = "x".repeat(1 << 20);
    let mut dup = df!("obs_id" => [big.as_str(), big.as_str()], "site" => ["FALCON-RT"; 2], "arrival_mjd_day" => [60_000i64; 2], "arrival_mjd_frac" => [0.1, 0.2], "freq_mhz" => [1400.0; 2], "sigma_us" => [1.0; 2]).unwrap();
    write(&i, &mut dup);
    let r = lapse(&["run", p.to_str().unwrap(), "--no-plots"]);
    assert_eq!(r.status.code(), Some(2));
    assert!(text(&r).contains("duplicate obs_id") && text(&r).len() < 2000, "{} bytes of message", text(&r).len());
    // (e) `lapse time … | head -1` ends quietly with exit 0.
    let epochs: String = (0..20_000).map(|k| format!("mjd:{}\n", 58_000 + k % 3000)).collect();
    std::fs::write(d.join("epochs.txt"), epochs).unwrap();
    let sh = format!("set -o pipefail; {} time --file {} | head -1", env!("CARGO_BIN_EXE_lapse"), d.join("epochs.txt").display());
    let r = std::process::Command::new("bash").args(["-c", &sh]).output().unwrap();
    assert_eq!(r.status.code(), Some(0), "{}", text(&r));
    assert!(!String::from_utf8_lossy(&r.stderr).contains("Broken pipe"), "{}", text(&r));
    // (f) int8 and decimal extra columns pass through.
    let mut df = demo_rows(5);
    df.with_column(Column::new("flag8".into(), [1i8, 2, 3, 4, 5])).unwrap();
    df.with_column(Column::new("amount".into(), [1.25f64, 2.5, 3.75, 5.0, 6.25]).cast(&DataType::Decimal(10, 2)).unwrap()).unwrap();
    write(&i, &mut df);
    let r = lapse(&["run", p.to_str().unwrap(), "--no-plots"]);
    assert_eq!(r.status.code(), Some(0), "{}", text(&r));
    let out = read(&o);
    assert!(out.column("flag8").is_ok() && out.column("amount").is_ok());
    // (g) an input column with an output column's name is refused up front.
    for name in ["reason", "residual_s", "reason_code"] {
        let _ = std::fs::remove_file(&o);
        let mut df = demo_rows(5);
        df.with_column(Column::new(name.into(), [0.0; 5])).unwrap();
        write(&i, &mut df);
        let r = lapse(&["run", p.to_str().unwrap(), "--no-plots"]);
        assert_eq!(r.status.code(), Some(2), "{name}: {}", text(&r));
        assert!(text(&r).contains(&format!("input column '{name}'")), "{}", text(&r));
        assert!(!o.exists());
    }
    // (h) the partitioned summary names the per-partition files; (i) --force.
    std::fs::create_dir_all(d.join("in")).unwrap();
    write(&d.join("in/a.parquet"), &mut demo_rows(5));
    write(&d.join("in/b.parquet"), &mut demo_rows(5).slice(5, 5));
    let pp = pulsar_pipeline(&d, &d.join("in").display().to_string(), &d.join("outs").display().to_string(), |t| t);
    let r = lapse(&["run", pp.to_str().unwrap(), "--no-plots"]);
    assert!(String::from_utf8_lossy(&r.stdout).contains("/<partition>.rejects.parquet"), "{}", text(&r));
    let r = lapse(&["run", pp.to_str().unwrap(), "--no-plots"]);
    assert!(String::from_utf8_lossy(&r.stdout).contains("rows in    0 (in the 0 partitions processed)"), "{}", text(&r));
    let r = lapse(&["run", pp.to_str().unwrap(), "--no-plots", "--force"]);
    assert!(String::from_utf8_lossy(&r.stdout).contains("partitions 2 processed, 0 up to date"), "{}", text(&r));
}

/// Item 16: provenance records canonical paths and every model parameter;
/// `lapse diff` shows the pipelines' texts as a unified diff; `--tolerance`
/// naming no column is an error; patterns match columns.
#[test]
fn item16_provenance_and_diff() {
    let d = tmpdir("h16");
    let mut df = demo_rows(20);
    write(&d.join("in.parquet"), &mut df);
    let a = pulsar_pipeline(&d, &d.join("in.parquet").display().to_string(), &d.join("a.parquet").display().to_string(), |t| t);
    assert_eq!(lapse(&["run", a.to_str().unwrap(), "--no-plots"]).status.code(), Some(0));
    let b = d.join("b.toml");
    std::fs::write(&b, std::fs::read_to_string(&a).unwrap().replace("measure_pc_cm3 = 41.27", "measure_pc_cm3 = 41.30").replace("a.parquet", "b.parquet")).unwrap();
    assert_eq!(lapse(&["run", b.to_str().unwrap(), "--no-plots"]).status.code(), Some(0));
    let md: std::collections::BTreeMap<String, String> = lapse::io::read_parquet_metadata(&d.join("a.parquet")).unwrap().into_iter().collect();
    assert_eq!(md["lapse.param.dispersion.measure_pc_cm3"], "41.27");
    assert_eq!(md["lapse.param.spin.derivatives.0"], "-6.31e-16");
    let canon = &md["lapse.input.kernel.0.canonical_path"];
    assert!(Path::new(canon).is_absolute() && !canon.contains("/../") && !canon.contains("/./"), "{canon}");
    assert!(md.contains_key("lapse.input.observations.0.canonical_path"));
    let r = lapse(&["diff", d.join("a.parquet").to_str().unwrap(), d.join("b.parquet").to_str().unwrap()]);
    let out = text(&r);
    assert!(out.contains("-measure_pc_cm3 = 41.27") && out.contains("+measure_pc_cm3 = 41.30"), "{out}");
    assert!(out.contains("lapse.param.dispersion.measure_pc_cm3"), "{out}");
    let r = lapse(&["diff", d.join("a.parquet").to_str().unwrap(), d.join("b.parquet").to_str().unwrap(), "--tolerance", "dispersion=1"]);
    assert_eq!(r.status.code(), Some(2), "{}", text(&r));
    assert!(text(&r).contains("'dispersion' matches no column"), "{}", text(&r));
    let r = lapse(&["diff", d.join("a.parquet").to_str().unwrap(), d.join("b.parquet").to_str().unwrap(), "--tolerance", "*_s=1", "--tolerance", "*_frac=1", "--tolerance", "pulse_number=1000000"]);
    assert_eq!(r.status.code(), Some(0), "patterns cover every changed column: {}", text(&r));
}
