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
    assert_eq!(v["rows"]["in"], 518);
    let sets = v["residuals"].as_array().unwrap();
    assert_eq!(sets.iter().map(|s| s["key"].as_str().unwrap()).collect::<Vec<_>>(), ["doppler_2way", "doppler_3way", "light_time_2way"]);
    assert_eq!(sets[0]["unit"], "hz");
    let file: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(d.join("demo.summary.json")).unwrap()).unwrap();
    assert_eq!(file["rows"]["out"], 518);
    assert!(file["run_id"].as_str().is_some());
}
