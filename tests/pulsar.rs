//! Pulsar batches: reference delays, the synthetic-data closure, the sign
//! rule, row accounting and bad input.
//!
//! Reference fixture: `tests/reference/pulsar_sweep.py` (pyerfa 2.0.1.5,
//! jplephem 2.24 on DE421; versions in the fixture's first line).

mod common;
use common::*;

use std::path::{Path, PathBuf};

use lapse::delays::Source;
use lapse::kinds::pulsar::Pulsar;
use lapse::pipeline::PipelineFile;
use lapse::time::TimeScale;
use polars::prelude::*;

/// Einstein delay against pyerfa dtdb + jplephem v_E·x/c²: issue 1 ns.
const EINSTEIN_TOL_S: f64 = 1e-9;
/// Roemer delay against pyerfa + jplephem: issue 2 ns.
const ROEMER_TOL_S: f64 = 2e-9;
/// Solar Shapiro delay against the closed formula with jplephem positions: issue 1 ps.
const SHAPIRO_SUN_TOL_S: f64 = 1e-12;
/// Residual RMS of noiseless synthetic arrival times: issue 1 ns.
const SYNTH_RMS_TOL_S: f64 = 1e-9;

/// The demo pipeline with absolute data paths, another input and output, and
/// optional line replacements.
fn pipeline(dir: &Path, input: &Path, replace: &[(&str, &str)]) -> PathBuf {
    let mut text = std::fs::read_to_string(root().join("pipelines/pulsar_demo.toml")).unwrap();
    let data = root().join("data").display().to_string();
    text = text.replace("\"../data", &format!("\"{data}"));
    text = text.replace(&format!("{data}/demo/pulsar_toas.parquet"), &input.display().to_string());
    text = text.replace("../out/pulsar_demo.parquet", &dir.join("out.parquet").display().to_string());
    for (a, b) in replace {
        assert!(text.contains(a), "pipeline has no '{a}'");
        text = text.replace(a, b);
    }
    let p = dir.join("pipeline.toml");
    std::fs::write(&p, text).unwrap();
    p
}

fn f64s(df: &DataFrame, c: &str) -> Vec<f64> {
    df.column(c).unwrap().f64().unwrap().iter().map(|v| v.unwrap()).collect()
}

fn i64s(df: &DataFrame, c: &str) -> Vec<i64> {
    df.column(c).unwrap().i64().unwrap().iter().map(|v| v.unwrap()).collect()
}

#[test]
fn delays_match_erfa_and_jplephem() {
    let d = tmpdir("reference");
    let p = pipeline(
        &d,
        Path::new("/unused.parquet"),
        &[("time_scale = \"site\"", "time_scale = \"utc\""), ("shapiro_bodies = [\"sun\", \"venus\", \"jupiter\", \"saturn\", \"uranus\", \"neptune\"]", "shapiro_bodies = [\"sun\"]")],
    );
    let mut lp = Pulsar::load(&PipelineFile::read(&p).unwrap()).unwrap();
    let text = std::fs::read_to_string(root().join("tests/fixtures/pulsar_sweep.csv")).unwrap();
    let rows: Vec<Vec<&str>> = text.lines().filter(|l| !l.starts_with('#')).skip(1).map(|l| l.split(',').collect()).collect();
    assert!(rows.len() >= 1000);
    let (mut me, mut mr, mut ms) = (0.0f64, 0.0f64, 0.0f64);
    for r in &rows {
        let f = |i: usize| r[i].parse::<f64>().unwrap();
        lp.ctx.source = Source { ra_rad: f(3).to_radians(), dec_rad: f(4).to_radians(), position_epoch_tdb_s: 0.0, pm_ra_cosdec_rad_yr: 0.0, pm_dec_rad_yr: 0.0, parallax_rad: 0.0 };
        let utc = lp.ctx.earth.time.epoch_from_mjd(TimeScale::Utc, r[0].parse().unwrap(), f(1)).unwrap();
        let out = lp.ctx.process_epoch(r[2], utc, f64::INFINITY).unwrap();
        let (de, dr, ds) = ((out.einstein_s - f(5)).abs(), (out.roemer_s - f(6)).abs(), (out.shapiro_body_s[0] - f(7)).abs());
        me = me.max(de);
        mr = mr.max(dr);
        ms = ms.max(ds);
        assert!(de <= EINSTEIN_TOL_S, "{r:?}: einstein off by {de}");
        assert!(dr <= ROEMER_TOL_S, "{r:?}: roemer off by {dr}");
        assert!(ds <= SHAPIRO_SUN_TOL_S, "{r:?}: shapiro_sun off by {ds}");
        // au/c = 499.004784 s (IAU 2012 B2): the Roemer term stays below ~1.02 au/c.
        assert!(out.roemer_s.abs() < 1.02 * 499.004784);
    }
    eprintln!("pulsar delays vs pyerfa+jplephem over {} arrivals: einstein {me:.3e} s, roemer {mr:.3e} s, shapiro_sun {ms:.3e} s", rows.len());
}

#[test]
fn noiseless_synthetic_arrivals_give_sub_ns_residuals() {
    let d = tmpdir("synth");
    // A plan over six years, both sites, three frequencies, in site-clock time.
    let plan = d.join("plan.csv");
    let mut s = String::from("site,mjd,freq_mhz,sigma_us\n");
    for k in 0..60 {
        let site = if k % 2 == 0 { "FALCON-RT" } else { "KESTREL-1" };
        let f = [820.0, 1400.0, 3100.0][k % 3];
        s.push_str(&format!("{site},{},{f},0.5\n", 58_700.0 + 35.3 * k as f64 + 0.37));
    }
    std::fs::write(&plan, s).unwrap();
    let toas = d.join("toas.parquet");
    let p = pipeline(&d, &toas, &[("subtract_weighted_mean = true", "subtract_weighted_mean = false")]);
    let o = lapse(&["synth", p.to_str().unwrap(), "--plan", plan.to_str().unwrap(), "--output", toas.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    let out = read(&d.join("out.parquet"));
    let r = f64s(&out, "residual_s");
    let rms = (r.iter().map(|x| x * x).sum::<f64>() / r.len() as f64).sqrt();
    assert_eq!(r.len(), 60);
    assert!(rms <= SYNTH_RMS_TOL_S, "RMS {rms}");
    eprintln!("noiseless synthetic residual RMS over 60 arrivals: {rms:.3e} s");

    // Sign rule, tested: BAT = TDB + roemer + parallax − shapiro − dispersion.
    // Both epochs are f64 day fractions (≈ 10 ps each), so 30 ps.
    const SIGN_RULE_TOL_S: f64 = 30e-12;
    let (td, tf, bd, bf) = (i64s(&out, "tdb_mjd_day"), f64s(&out, "tdb_mjd_frac"), i64s(&out, "bat_mjd_day"), f64s(&out, "bat_mjd_frac"));
    let (ro, pa, sh, di) = (f64s(&out, "roemer_s"), f64s(&out, "parallax_s"), f64s(&out, "shapiro_s"), f64s(&out, "dispersion_s"));
    for i in 0..out.height() {
        let dt_s = ((bd[i] - td[i]) as f64 + (bf[i] - tf[i])) * 86_400.0;
        let sum_s = ro[i] + pa[i] - sh[i] - di[i];
        assert!((dt_s - sum_s).abs() < SIGN_RULE_TOL_S, "row {i}: {dt_s} vs {sum_s}");
        assert!(di[i] > 0.0 && pa[i] <= 0.0);
    }
    // The per-body columns add up to shapiro_s.
    let bodies = ["sun", "venus", "jupiter", "saturn", "uranus", "neptune"];
    let per_body: Vec<Vec<f64>> = bodies.iter().map(|b| f64s(&out, &format!("shapiro_{b}_s"))).collect();
    for (i, sh_i) in sh.iter().enumerate() {
        let total: f64 = per_body.iter().map(|c| c[i]).sum();
        assert!((total - sh_i).abs() < 1e-18);
    }
    // clock_s is the chain total: FALCON-RT ≈ +2.5 µs, KESTREL-1 ≈ −0.8 µs.
    let clock = f64s(&out, "clock_s");
    assert!(clock.iter().all(|c| c.abs() > 0.5e-6 && c.abs() < 4e-6));
}

#[test]
fn every_row_is_accounted_for() {
    let d = tmpdir("rejects");
    let toas = d.join("toas.parquet");
    let ids = ["ok", "badsite", "nanfrac", "negfreq", "zerosigma", "noclock", "beyond", "infreq", "nullsite"];
    let sites: Vec<Option<&str>> = vec![Some("FALCON-RT"), Some("NOWHERE"), Some("FALCON-RT"), Some("FALCON-RT"), Some("FALCON-RT"), Some("OSPREY-3"), Some("FALCON-RT"), Some("KESTREL-1"), None];
    let days = [59_000i64, 59_000, 59_000, 59_000, 59_000, 59_000, 61_000, 59_001, 59_000];
    let fracs = [0.3, 0.3, f64::NAN, 0.3, 0.3, 0.3, 0.3, 0.4, 0.3];
    let freqs = [1400.0, 1400.0, 1400.0, -5.0, 1400.0, 1400.0, 1400.0, f64::INFINITY, 1400.0];
    let sig = [0.5, 0.5, 0.5, 0.5, 0.0, 0.5, 0.5, 0.5, 0.5];
    let mut df = df!("obs_id" => ids, "site" => sites, "arrival_mjd_day" => days, "arrival_mjd_frac" => fracs, "freq_mhz" => freqs, "sigma_us" => sig, "backend" => ["x"; 9]).unwrap();
    ParquetWriter::new(std::fs::File::create(&toas).unwrap()).finish(&mut df).unwrap();
    let p = pipeline(&d, &toas, &[]);
    let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    let out = read(&d.join("out.parquet"));
    let rej = read(&d.join("out.rejects.parquet"));
    assert_eq!(out.height() + rej.height(), ids.len());
    let kept: Vec<&str> = out.column("obs_id").unwrap().str().unwrap().iter().map(|s| s.unwrap()).collect();
    assert_eq!(kept, ["ok", "infreq"]);
    assert_eq!(f64s(&out, "dispersion_s")[1], 0.0, "infinite frequency: no dispersion");
    assert!(out.column("backend").is_ok(), "pass-through column");
    let reasons: Vec<String> = rej.column("reason").unwrap().str().unwrap().iter().map(|s| s.unwrap().to_string()).collect();
    for needle in
        ["unknown site", "arrival_mjd_frac out of range", "freq_mhz invalid", "sigma_us invalid", "no clock chain for site 'OSPREY-3'", "clock correction unavailable", "missing value: site is null"]
    {
        assert!(reasons.iter().any(|r| r.contains(needle)), "no reason with '{needle}': {reasons:?}");
    }
    // Every reject carries a stable code beside its message.
    let codes: Vec<String> = rej.column("reason_code").unwrap().str().unwrap().iter().map(|s| s.unwrap().to_string()).collect();
    for code in ["unknown_station", "fraction_out_of_range", "invalid_value", "clock_unavailable", "missing_value"] {
        assert!(codes.iter().any(|c| c == code), "no reason_code '{code}': {codes:?}");
    }
    assert!(codes.iter().all(|c| lapse::reject::RejectCode::parse(c).is_some()), "{codes:?}");
    // The summary counts rejects by code.
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("rejected   7"), "{stdout}");
    assert!(stdout.contains("clock_unavailable"), "{stdout}");
}

#[test]
fn clock_extrapolation_is_explicit_and_flagged() {
    let d = tmpdir("extrapolate");
    let toas = d.join("toas.parquet");
    // MJD 61000 is past the demo clock tables (… 60900).
    let mut df = df!("obs_id" => ["late"], "site" => ["FALCON-RT"], "arrival_mjd_day" => [61_000i64], "arrival_mjd_frac" => [0.3], "freq_mhz" => [1400.0], "sigma_us" => [0.5]).unwrap();
    ParquetWriter::new(std::fs::File::create(&toas).unwrap()).finish(&mut df).unwrap();
    let p = pipeline(&d, &toas, &[("allow_extrapolation = false", "allow_extrapolation = true")]);
    let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    let out = read(&d.join("out.parquet"));
    assert_eq!(out.column("clock_extrapolated").unwrap().bool().unwrap().get(0), Some(true));
    assert!(String::from_utf8_lossy(&o.stdout).contains("EXTRAPOLATED"));
}

#[test]
fn bad_tables_and_pipelines_stop_before_writing() {
    let d = tmpdir("bad");
    let toas = d.join("toas.parquet");
    let check = |df: &mut DataFrame, needle: &str| {
        ParquetWriter::new(std::fs::File::create(&toas).unwrap()).finish(df).unwrap();
        let p = pipeline(&d, &toas, &[]);
        let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]);
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{err}");
        assert!(err.contains(needle), "expected '{needle}': {err}");
        assert!(!d.join("out.parquet").exists(), "nothing may be written");
    };
    check(&mut df!("obs_id" => ["a"], "site" => ["FALCON-RT"], "arrival_mjd_day" => [59_000i64], "arrival_mjd_frac" => [0.3], "freq_mhz" => [1400.0]).unwrap(), "missing column 'sigma_us'");
    check(
        &mut df!("obs_id" => ["a"], "site" => ["FALCON-RT"], "arrival_mjd_day" => [59_000.0], "arrival_mjd_frac" => [0.3], "freq_mhz" => [1400.0], "sigma_us" => [1.0]).unwrap(),
        "column 'arrival_mjd_day' has type",
    );
    check(
        &mut df!("obs_id" => ["a", "a"], "site" => ["FALCON-RT"; 2], "arrival_mjd_day" => [59_000i64; 2], "arrival_mjd_frac" => [0.3; 2], "freq_mhz" => [1400.0; 2], "sigma_us" => [1.0; 2]).unwrap(),
        "duplicate obs_id 'a'",
    );
    // Unknown keys and bad values in the pipeline.
    let p = pipeline(&d, &toas, &[("[spin]", "[spin]\nfrequncy_typo = 3.0")]);
    let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("frequncy_typo"));
    let p = pipeline(&d, &toas, &[("shapiro_bodies = [\"sun\",", "shapiro_bodies = [\"vulcan\", \"sun\",")]);
    let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]);
    assert!(String::from_utf8_lossy(&o.stderr).contains("unknown Shapiro body 'vulcan'"));
}

#[test]
fn fast_path_agrees_with_direct_path() {
    // Batches use grids (X, Y, s and TDB − TT every 0.5 d, Shapiro bodies'
    // positions every 0.5 d) and step the Earth linearly across the observer
    // term; single calls use the series and the kernels. Over 3000 arrivals 2019–2025: times within 1 ps, positions
    // within 1 mm (issue requirement).
    const FAST_VS_DIRECT_TIME_S: f64 = 1e-12;
    const FAST_VS_DIRECT_POSITION_M: f64 = 1e-3;
    let d = tmpdir("fastpath");
    let p = pipeline(&d, Path::new("/unused.parquet"), &[]);
    let direct = Pulsar::load(&PipelineFile::read(&p).unwrap()).unwrap();
    let mut fast = Pulsar::load(&PipelineFile::read(&p).unwrap()).unwrap();
    fast.ctx.cover_batch_days(&[Some(58_600), Some(60_900)]);
    let st = direct.ctx.stations.get("KESTREL-1").unwrap().clone();
    let (mut mt, mut mp) = (0.0f64, 0.0f64);
    for k in 0..3000 {
        let mjd = 58_650.0 + k as f64 * 0.7271;
        let utc = direct.ctx.earth.time.epoch_from_mjd(TimeScale::Utc, mjd.floor() as i64, mjd.fract()).unwrap();
        let a = direct.ctx.process_epoch(if k % 2 == 0 { "FALCON-RT" } else { "KESTREL-1" }, utc, 1400.0).unwrap();
        let b = fast.ctx.process_epoch(if k % 2 == 0 { "FALCON-RT" } else { "KESTREL-1" }, utc, 1400.0).unwrap();
        let dt = ((b.bat.label_fs() - a.bat.label_fs()) as f64 * 1e-15).abs().max((b.einstein_s - a.einstein_s).abs()).max((b.roemer_s - a.roemer_s).abs());
        mt = mt.max(dt);
        let sa = direct.ctx.earth.station_state(&direct.ctx.ephemeris, &st, &utc).unwrap();
        let sb = fast.ctx.earth.station_state(&fast.ctx.ephemeris, &st, &utc).unwrap();
        mp = mp.max((sa.bcrs_position_m - sb.bcrs_position_m).norm());
    }
    eprintln!("fast vs direct over 3000 arrivals: times {mt:.3e} s, station BCRS {mp:.3e} m");
    assert!(mt <= FAST_VS_DIRECT_TIME_S && mp <= FAST_VS_DIRECT_POSITION_M, "{mt} s, {mp} m");
}
