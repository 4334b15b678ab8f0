//! Release validation: bit-reproducible runs, provenance, and `lapse diff`.

mod common;
use common::*;

use std::path::Path;

use polars::prelude::*;

#[test]
fn runs_are_bit_reproducible_across_threads_and_chunks() {
    let d = tmpdir("repro");
    let demo = root().join("pipelines/pulsar_demo.toml");
    let mut outs = Vec::new();
    for (threads, chunk) in [("1", "4096"), ("2", "4096"), ("7", "4096"), ("2", "97"), ("7", "1")] {
        let out = d.join(format!("t{threads}-c{chunk}.parquet"));
        let o = lapse(&["run", demo.to_str().unwrap(), "--output", out.to_str().unwrap(), "--threads", threads, "--chunk-rows", chunk, "-q"]);
        assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stderr));
        outs.push(out);
    }
    let first = column_bits(&read(&outs[0]));
    let meta = |p: &Path| -> Vec<(String, String)> { lapse::io::read_parquet_metadata(p).unwrap().into_iter().filter(|(k, _)| k != "lapse.run.started_utc" && k != "lapse.run.id").collect() };
    let meta0 = meta(&outs[0]);
    for o in &outs[1..] {
        assert_eq!(column_bits(&read(o)), first, "{} differs from {}", o.display(), outs[0].display());
        // Metadata identical too, apart from the run's start time.
        assert_eq!(meta(o), meta0);
    }
    // And across runs: the committed golden output has the same data.
    assert_eq!(column_bits(&read(&root().join("tests/golden/pulsar_demo.parquet"))), first);
}

#[test]
fn provenance_is_complete_and_printable() {
    let d = tmpdir("prov");
    let out = d.join("o.parquet");
    let o = lapse(&["run", root().join("pipelines/pulsar_demo.toml").to_str().unwrap(), "--output", out.to_str().unwrap(), "-q"]);
    assert_eq!(o.status.code(), Some(0));
    let md: std::collections::BTreeMap<String, String> = lapse::io::read_parquet_metadata(&out).unwrap().into_iter().collect();
    for key in [
        "lapse.version",
        "lapse.source_revision",
        "lapse.pipeline.text",
        "lapse.pipeline.sha256",
        "lapse.run.started_utc",
        "lapse.input.observations.0.sha256",
        "lapse.input.observations.0.coverage",
        "lapse.input.kernel.0.sha256",
        "lapse.input.kernel.0.coverage",
        "lapse.input.eop.0.coverage",
        "lapse.input.leap_seconds.0.coverage",
        "lapse.input.stations.0.sha256",
        "lapse.input.clock:FALCON-RT.1.sha256",
        "lapse.constants.gm_m3_s2.sun",
        "lapse.constants.ppn_gamma",
        "lapse.constants.dispersion_k_s_mhz2_cm3_pc",
        "lapse.rows.in",
        "lapse.rows.out",
        "lapse.rows.rejected",
    ] {
        assert!(md.contains_key(key), "missing {key}");
    }
    // The pipeline hash is the SHA-256 of the recorded text.
    assert_eq!(md["lapse.pipeline.sha256"], lapse::pipeline::sha256_hex(md["lapse.pipeline.text"].as_bytes()));
    let o = lapse(&["provenance", out.to_str().unwrap()]);
    let text = String::from_utf8_lossy(&o.stdout);
    assert_eq!(o.status.code(), Some(0));
    assert!(text.contains("input.kernel.0.sha256") && text.contains("a20a7139da04cbc4") && text.contains("# pipeline text"), "{text}");
}

#[test]
fn diff_reports_injected_differences_exactly() {
    let d = tmpdir("diff");
    let (a, b) = (d.join("a.parquet"), d.join("b.parquet"));
    let n = 1000usize;
    let ids: Vec<String> = (0..n).map(|i| format!("r{i:04}")).collect();
    let x: Vec<f64> = (0..n).map(|i| i as f64 * 0.5).collect();
    let mut y: Vec<f64> = (0..n).map(|i| (i as f64).sin()).collect();
    y[10] = f64::NAN; // NaN on both sides: equal
    let k: Vec<i64> = (0..n as i64).collect();
    let mut dfa = df!("obs_id" => &ids, "x_s" => &x, "y_s" => &y, "k" => &k, "site" => vec!["A"; n], "only_a_col" => &x).unwrap();
    // B: x shifted by 1e-9 on rows ≥ 900 (and 5e-9 on row 950), y NaN on one
    // side at row 20, row r0005 missing, an extra row, an extra column, k
    // stored as f64 (type change), one site changed.
    let mut x2 = x.clone();
    for (i, v) in x2.iter_mut().enumerate().skip(900) {
        *v += if i == 950 { 5e-9 } else { 1e-9 };
    }
    let mut y2 = y.clone();
    y2[20] = f64::NAN;
    let mut site2 = vec!["A"; n];
    site2[30] = "B";
    let keep: Vec<usize> = (0..n).filter(|i| *i != 5).collect();
    let mut ids2: Vec<String> = keep.iter().map(|i| ids[*i].clone()).collect();
    ids2.push("r9999".into());
    let pick = |v: &Vec<f64>, extra: f64| -> Vec<f64> {
        let mut o: Vec<f64> = keep.iter().map(|i| v[*i]).collect();
        o.push(extra);
        o
    };
    let k2: Vec<f64> = pick(&k.iter().map(|v| *v as f64).collect(), 0.0);
    let mut site2v: Vec<&str> = keep.iter().map(|i| site2[*i]).collect();
    site2v.push("A");
    let mut dfb = df!("obs_id" => &ids2, "x_s" => pick(&x2, 0.0), "y_s" => pick(&y2, 0.0), "k" => k2, "site" => site2v, "only_b_col" => pick(&x, 0.0)).unwrap();
    write(&a, &mut dfa);
    write(&b, &mut dfb);

    let tol = lapse::diff::Tolerances { default: 0.0, per_column: [("x_s".to_string(), 2e-9)].into_iter().collect() };
    let (r, rows) = lapse::diff::diff(&a, &b, &["obs_id".to_string()], &tol, true).unwrap();
    assert_eq!((r.rows_a, r.rows_b, r.matched), (1000, 1000, 999));
    assert_eq!(r.only_a, ["r0005"]);
    assert_eq!(r.only_b, ["r9999"]);
    assert_eq!(r.columns_only_a, ["only_a_col"]);
    assert_eq!(r.columns_only_b, ["only_b_col"]);
    assert_eq!(r.type_changes, [("k".to_string(), "i64".to_string(), "f64".to_string())]);
    let col = |name: &str| r.columns.iter().find(|c| c.column == name).unwrap().clone();
    let cx = col("x_s");
    assert_eq!(cx.compared, 999);
    assert_eq!(cx.exceeding, 1, "only the 5e-9 shift exceeds 2e-9");
    // x ≈ 475 has an f64 ulp of 5.7e-14, so the shift is recovered to ~1e-13.
    assert!((cx.max_abs_delta - 5e-9).abs() < 1e-12);
    assert_eq!(cx.max_row_key.as_deref(), Some("r0950"));
    let cy = col("y_s");
    assert_eq!(cy.exceeding, 1, "NaN against a number differs; NaN against NaN does not");
    assert!(cy.max_abs_delta.is_infinite());
    assert_eq!(col("k").exceeding, 0, "values equal despite the type change");
    assert_eq!(col("site").exceeding, 1);
    assert!(!r.within_tolerance());
    let rows = rows.unwrap();
    // Changed rows: 100 shifted x (900..999, one of which… all matched), row 20 (y), row 30 (site); plus 2 unmatched.
    assert_eq!(rows.status.iter().filter(|s| **s == "changed").count(), 102);
    assert_eq!(rows.status.iter().filter(|s| **s != "changed").count(), 2);

    // Through the binary: exit 1, report and rows written.
    let (rep, rws) = (d.join("report.md"), d.join("rows.parquet"));
    let o = lapse(&["diff", a.to_str().unwrap(), b.to_str().unwrap(), "--tolerance", "x_s=2e-9", "--report", rep.to_str().unwrap(), "--rows", rws.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1), "{}", String::from_utf8_lossy(&o.stderr));
    let out = String::from_utf8_lossy(&o.stdout);
    assert!(out.contains("only in A 1") && out.contains("type change: k: i64 → f64") && out.contains("DIFFERENCES BEYOND TOLERANCE"), "{out}");
    assert!(std::fs::read_to_string(&rep).unwrap().contains("| x_s | 999 |"));
    assert_eq!(read(&rws).height(), 104);

    // Identical files: exit 0; a tolerance file works too.
    let tf = d.join("tol.toml");
    std::fs::write(&tf, "default = 0.0\n[tolerances]\nx_s = 1e-6\n").unwrap();
    let o = lapse(&["diff", a.to_str().unwrap(), a.to_str().unwrap(), "--tolerance-file", tf.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(0), "{}", String::from_utf8_lossy(&o.stdout));
}

#[test]
fn diff_bad_inputs_exit_2() {
    let d = tmpdir("diffbad");
    let good = d.join("g.parquet");
    write(&good, &mut df!("obs_id" => ["a", "b"], "v" => [1.0, 2.0]).unwrap());
    let dup = d.join("dup.parquet");
    write(&dup, &mut df!("obs_id" => ["a", "a"], "v" => [1.0, 2.0]).unwrap());
    let nokey = d.join("nokey.parquet");
    write(&nokey, &mut df!("id" => ["a"], "v" => [1.0]).unwrap());
    let junk = d.join("junk.parquet");
    std::fs::write(&junk, "not parquet at all").unwrap();
    for (b, needle) in [(&dup, "duplicate key a"), (&nokey, "no key column 'obs_id'"), (&junk, "junk.parquet"), (&d.join("missing.parquet"), "missing.parquet")] {
        let o = lapse(&["diff", good.to_str().unwrap(), b.to_str().unwrap()]);
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{err}");
        assert!(err.contains(needle), "expected '{needle}': {err}");
    }
    let o = lapse(&["diff", good.to_str().unwrap(), good.to_str().unwrap(), "--tolerance", "v=abc"]);
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn diff_explains_a_changed_constant_by_provenance() {
    let d = tmpdir("gamma");
    let (a, b) = (d.join("a.parquet"), d.join("b.parquet"));
    assert_eq!(lapse(&["run", root().join("pipelines/pulsar_demo.toml").to_str().unwrap(), "--output", a.to_str().unwrap(), "-q"]).status.code(), Some(0));
    assert_eq!(lapse(&["run", root().join("pipelines/pulsar_demo_gamma.toml").to_str().unwrap(), "--output", b.to_str().unwrap(), "-q"]).status.code(), Some(0));
    let (r, _) = lapse::diff::diff(&a, &b, &["obs_id".to_string()], &lapse::diff::Tolerances::default(), false).unwrap();
    let gamma = r.provenance.iter().find(|p| p.key == "lapse.constants.ppn_gamma").expect("γ change recorded");
    assert!(gamma.explains);
    assert_eq!(gamma.b.as_deref(), Some("0.99998"));
    let shapiro = r.columns.iter().find(|c| c.column == "shapiro_s").unwrap();
    assert!(shapiro.exceeding > 0 && shapiro.max_abs_delta < 1e-9, "γ changed by 2e-5 moves Shapiro by < 1 ns: {}", shapiro.max_abs_delta);
}
