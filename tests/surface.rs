//! What users touch: plot formats and titles, machine-readable summaries
//! (issue "What users touch"; the items done so far).

mod common;
use common::*;

/// PNG only by default, SVG on request; titles name the source and the
/// pipeline.
#[test]
fn plots_are_png_unless_svg_is_asked_for() {
    let d = tmpdir("surface-plots");
    let out = d.join("demo.parquet");
    let o = lapse(&["run", root().join("pipelines/pulsar_demo.toml").to_str().unwrap(), "--output", out.to_str().unwrap(), "-q"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(d.join("demo.residuals.png").exists() && !d.join("demo.residuals.svg").exists());
    let o = lapse(&["run", root().join("pipelines/pulsar_demo.toml").to_str().unwrap(), "--output", out.to_str().unwrap(), "-q", "--plots", "png,svg", "--force"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    let svg = std::fs::read_to_string(d.join("demo.residuals.svg")).unwrap();
    assert!(svg.contains("LAPSE-PSR-A (pulsar_demo) timing residuals"), "title names the source and pipeline");
    let o = lapse(&["run", root().join("pipelines/pulsar_demo.toml").to_str().unwrap(), "--output", out.to_str().unwrap(), "--plots", "gif"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("unknown plot format 'gif'"));
}

/// `<stem>.summary.json` beside each output and `--summary-json -` on stdout.
#[test]
fn summaries_are_machine_readable() {
    let d = tmpdir("surface-json");
    let out = d.join("demo.parquet");
    let o = lapse(&["run", root().join("pipelines/tracking_demo.toml").to_str().unwrap(), "--output", out.to_str().unwrap(), "--no-plots", "--summary-json", "-"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(!stdout.contains("rows in "), "JSON instead of the text summary");
    let v: serde_json::Value = serde_json::from_str(&stdout).unwrap();
    assert_eq!(v["rows"]["in"], 524);
    let sets = v["residuals"].as_array().unwrap();
    assert_eq!(sets.iter().map(|s| s["key"].as_str().unwrap()).collect::<Vec<_>>(), ["doppler_2way", "doppler_3way", "light_time_2way"]);
    assert_eq!(sets[0]["unit"], "hz");
    let file: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(d.join("demo.summary.json")).unwrap()).unwrap();
    assert_eq!(file["rows"]["out"], 524);
    assert!(file["run_id"].as_str().is_some());
}

/// `lapse time` reads day-of-year dates and prints CSV or JSON for scripts.
#[test]
fn time_takes_day_of_year_and_prints_csv_or_json() {
    let o = lapse(&["time", "2024-080T12:00:00", "--to", "utc,tdb", "--format", "csv"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    let csv = String::from_utf8_lossy(&o.stdout);
    let lines: Vec<&str> = csv.lines().collect();
    assert_eq!(lines[0], "input,from,scale,iso,mjd");
    assert!(lines[1].starts_with("2024-080T12:00:00,UTC,utc,2024-03-20T12:00:00.000000000000000,60389.5"), "{csv}");
    let o = lapse(&["time", "mjd:60389.5", "--to", "tt", "--format", "json"]);
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v[0]["scale"], "tt");
    assert!(v[0]["iso"].as_str().unwrap().starts_with("2024-03-20T12:01:09.184"));
    assert_eq!(lapse(&["time", "mjd:60389.5", "--format", "xml"]).status.code(), Some(2));
}

/// `lapse export --csv` writes a residual table as text, every digit kept.
#[test]
fn export_writes_csv() {
    let d = tmpdir("surface-export");
    let out = d.join("demo.parquet");
    assert_eq!(lapse(&["run", root().join("pipelines/pulsar_demo.toml").to_str().unwrap(), "--output", out.to_str().unwrap(), "-q", "--no-plots"]).status.code(), Some(0));
    let csv_path = d.join("demo.csv");
    let o = lapse(&["export", out.to_str().unwrap(), "--csv", "--output", csv_path.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    let text = std::fs::read_to_string(&csv_path).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 1341);
    let header: Vec<&str> = lines[0].split(',').collect();
    let k = header.iter().position(|h| *h == "residual_s").unwrap();
    let df = read(&out);
    let r0 = df.column("residual_s").unwrap().f64().unwrap().get(0).unwrap();
    assert_eq!(lines[1].split(',').nth(k).unwrap().parse::<f64>().unwrap(), r0, "the same f64");
}

/// One vocabulary: `[time] leap_seconds` and `[input] time_scale` in every
/// kind; the old spellings work with a deprecation warning.
#[test]
fn old_key_spellings_warn_but_work() {
    let d = tmpdir("surface-keys");
    let text = std::fs::read_to_string(root().join("pipelines/timescales_demo.toml")).unwrap().replace("../", &format!("{}/", root().display())).replace("time_scale = \"utc\"", "scale = \"utc\"");
    let text = text.replace(&format!("{}/out/timescales_demo.parquet", root().display()), &d.join("ts.parquet").display().to_string());
    std::fs::write(d.join("ts.toml"), text).unwrap();
    let o = lapse(&["run", d.join("ts.toml").to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stderr).contains("[input] scale is deprecated"));
    let text = std::fs::read_to_string(root().join("pipelines/pulsar_demo.toml")).unwrap().replace("../", &format!("{}/", root().display()));
    let old = text
        .replace(&format!("[time]\nleap_seconds = \"{}/data/Leap_Second.dat\"\n", root().display()), "")
        .replace(&format!("eop = \"{}/data/finals2000A.all\"", root().display()), &format!("eop = \"{0}/data/finals2000A.all\"\nleap_seconds = \"{0}/data/Leap_Second.dat\"", root().display()));
    assert_ne!(old, text);
    std::fs::write(d.join("p.toml"), old.replace(&format!("{}/out/pulsar_demo.parquet", root().display()), &d.join("p.parquet").display().to_string())).unwrap();
    let o = lapse(&["run", d.join("p.toml").to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stderr).contains("[earth] leap_seconds is deprecated"));
    assert_eq!(read(&d.join("p.parquet")).column("residual_s").unwrap(), read(&root().join("tests/golden/pulsar_demo.parquet")).column("residual_s").unwrap());
}

/// Source positions in sexagesimal text or ecliptic coordinates give the
/// same ICRS direction as the degrees they stand for; the ecliptic
/// conversion matches pyerfa 2.0.1.5 `eceq06` at J2000.0
/// (`tests/reference/ecliptic_sweep.py`, fixture `ecliptic_icrs.csv`) to
/// 1e-12 deg.
#[test]
fn source_positions_in_sexagesimal_and_ecliptic_form() {
    const ECLIPTIC_TOL_DEG: f64 = 1e-12;
    let text = std::fs::read_to_string(root().join("tests/fixtures/ecliptic_icrs.csv")).unwrap();
    let mut n = 0;
    for line in text.lines().filter(|l| !l.starts_with('#') && !l.starts_with("lon")) {
        let v: Vec<f64> = line.split(',').map(|x| x.parse().unwrap()).collect();
        let (ra, dec) = lapse::delays::ecliptic_j2000_to_icrs_deg(v[0], v[1]);
        let dra = ((ra - v[2] + 180.0).rem_euclid(360.0) - 180.0).abs();
        assert!(dra * v[3].to_radians().cos() <= ECLIPTIC_TOL_DEG && (dec - v[3]).abs() <= ECLIPTIC_TOL_DEG, "{line}: {ra} {dec}");
        n += 1;
    }
    assert_eq!(n, 42);
    // Sexagesimal: 16:53:39.048 = 253.4127°, -31:17:04.56 = -31.2846°.
    assert!((lapse::kinds::pulsar::sexagesimal("16:53:39.048").unwrap() * 15.0 - 253.4127).abs() < 1e-12);
    assert!((lapse::kinds::pulsar::sexagesimal("-31:17:04.56").unwrap() + 31.2846).abs() < 1e-12);
    assert!((lapse::kinds::pulsar::sexagesimal("-00:30:00").unwrap() + 0.5).abs() < 1e-15, "the sign of -00");
    assert!(lapse::kinds::pulsar::sexagesimal("12:61:00").is_none());
    // Through a run: the sexagesimal pipeline's residuals are the degree pipeline's.
    let d = tmpdir("surface-source");
    let text = std::fs::read_to_string(root().join("pipelines/pulsar_demo.toml")).unwrap().replace("../", &format!("{}/", root().display()));
    let sexa = text.replace("ra_deg = 253.4127\ndec_deg = -31.2846", "ra_hms = \"16:53:39.048\"\ndec_dms = \"-31:17:04.56\"");
    assert_ne!(sexa, text);
    std::fs::write(d.join("s.toml"), sexa.replace(&format!("{}/out/pulsar_demo.parquet", root().display()), &d.join("s.parquet").display().to_string())).unwrap();
    let o = lapse(&["run", d.join("s.toml").to_str().unwrap(), "--no-plots"]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
    let (a, b) = (read(&d.join("s.parquet")), read(&root().join("tests/golden/pulsar_demo.parquet")));
    let r = |df: &polars::prelude::DataFrame| df.column("residual_s").unwrap().f64().unwrap().iter().map(|v| v.unwrap()).collect::<Vec<f64>>();
    let worst = r(&a).iter().zip(r(&b)).map(|(x, y)| (x - y).abs()).fold(0.0, f64::max);
    assert!(worst < 1e-12, "sexagesimal vs degrees: {worst} s");
    let md: std::collections::BTreeMap<String, String> = lapse::io::read_parquet_metadata(&d.join("s.parquet")).unwrap().into_iter().collect();
    assert_eq!(md["lapse.param.source.ra_hms"], "16:53:39.048");
    assert!(md["lapse.source.ra_deg_used"].starts_with("253.41"));
    // Two forms at once are refused.
    let both = text.replace("ra_deg = 253.4127", "ra_deg = 253.4127\nra_hms = \"16:53:39.048\"");
    std::fs::write(d.join("b.toml"), both).unwrap();
    assert_eq!(lapse(&["check", d.join("b.toml").to_str().unwrap()]).status.code(), Some(2));
}
