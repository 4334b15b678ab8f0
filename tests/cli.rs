//! The `lapse` binary: exit codes and messages, never a panic.

mod common;
use common::*;

use std::path::{Path, PathBuf};
use std::process::Output;

use polars::prelude::*;

fn text(o: &Output) -> (String, String) {
    (String::from_utf8_lossy(&o.stdout).into_owned(), String::from_utf8_lossy(&o.stderr).into_owned())
}

fn assert_clean_error(o: &Output, needle: &str) {
    let (out, err) = text(o);
    assert_eq!(o.status.code(), Some(2), "stdout: {out}\nstderr: {err}");
    assert!(err.contains(needle), "expected '{needle}' in stderr: {err}");
    assert!(!err.contains("panicked"), "panic: {err}");
}

#[test]
fn time_converts_the_2016_leap_second() {
    let o = lapse(&["time", "2016-12-31T23:59:60.5", "--to", "utc,tai,tt"]);
    let (out, err) = text(&o);
    assert_eq!(o.status.code(), Some(0), "{err}");
    assert!(out.contains("utc  2016-12-31T23:59:60.500000000000000"), "{out}");
    // TAI − UTC = 36 s during the leap second (IERS Bulletin C 52).
    assert!(out.contains("tai  2017-01-01T00:00:36.500000000000000"), "{out}");
    assert!(out.contains("tt   2017-01-01T00:01:08.684000000000000"), "{out}");
    // MJD fraction of the leap day is elapsed seconds / 86401.
    assert!(out.contains("MJD 57753.999994213029941783"), "{out}");
}

#[test]
fn time_reads_a_file_of_epochs() {
    let d = tmpdir("epochs");
    let f = d.join("epochs.txt");
    std::fs::write(&f, "# comment\nmjd:58000.25\n2020-01-01T00:00:00 # new year\n").unwrap();
    let o = lapse(&["time", "--file", f.to_str().unwrap(), "--from", "tt", "--to", "tdb"]);
    let (out, err) = text(&o);
    assert_eq!(o.status.code(), Some(0), "{err}");
    assert_eq!(out.lines().filter(|l| l.starts_with("tdb")).count(), 2, "{out}");
}

#[test]
fn time_bad_inputs_are_clean_errors() {
    assert_clean_error(&lapse(&["time", "yesterday"]), "cannot read epoch 'yesterday'");
    assert_clean_error(&lapse(&["time", "2020-01-01", "--from", "tcx"]), "unknown time scale 'tcx'");
    assert_clean_error(&lapse(&["time", "2020-01-01", "--to", "tt,xyz"]), "unknown time scale 'xyz'");
    assert_clean_error(&lapse(&["time", "mjd:nan"]), "cannot read epoch 'mjd:nan'");
    assert_clean_error(&lapse(&["time", "1968-05-01T00:00:00"]), "before 1972-01-01");
    assert_clean_error(&lapse(&["time", "2040-01-01T00:00:00"]), "leap-second window");
    assert_clean_error(&lapse(&["time", "2016-12-30T23:59:60"]), "second 60 exists only");
    assert_clean_error(&lapse(&["time", "2020-01-01", "--observer-term-s", "NaN"]), "not a finite number");
    assert_clean_error(&lapse(&["time", "--file", "/no/such/file.txt"]), "/no/such/file.txt");
    assert_clean_error(&lapse(&["time"]), "no epochs given");
    let d = tmpdir("badleap");
    let leap = d.join("Leap_Second.dat");
    std::fs::write(&leap, "#  File expires on 28 June 2027\n 41317.0 1 1 1972 10\n garbage\n").unwrap();
    assert_clean_error(&lapse(&["time", "2020-01-01", "--leap-file", leap.to_str().unwrap()]), "line 3");
    // Expired table extension is explicit.
    let o = lapse(&["time", "2040-01-01T00:00:00", "--extend-leaps", "--to", "tai"]);
    assert_eq!(o.status.code(), Some(0), "{}", text(&o).1);
    assert!(text(&o).0.contains("2040-01-01T00:00:37.000000000000000"));
}

fn write_epochs(path: &Path, ids: &[&str], days: &[i64], fracs: &[f64]) {
    let mut df = df!(
        "obs_id" => ids,
        "mjd_day" => days,
        "mjd_frac" => fracs,
        "note" => ids.iter().map(|s| format!("note-{s}")).collect::<Vec<_>>(),
    )
    .unwrap();
    let f = std::fs::File::create(path).unwrap();
    ParquetWriter::new(f).finish(&mut df).unwrap();
}

fn write_pipeline(dir: &Path, body: &str) -> PathBuf {
    let p = dir.join("p.toml");
    std::fs::write(&p, body).unwrap();
    p
}

#[test]
fn timescales_pipeline_rejects_bad_rows_and_counts_them() {
    let d = tmpdir("pipeline");
    write_epochs(&d.join("in.parquet"), &["a", "b", "c", "d", "e"], &[57_753, 58_000, 40_000, 58_001, 99_000], &[86_400.5 / 86_401.0, 0.5, 0.1, f64::NAN, 0.2]);
    let p = write_pipeline(&d, "kind = \"timescales\"\n[input]\npath = \"in.parquet\"\n[output]\npath = \"out/out.parquet\"\n");
    let o = lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]);
    let (out, err) = text(&o);
    assert_eq!(o.status.code(), Some(0), "{out}{err}");
    let df = ParquetReader::new(std::fs::File::open(d.join("out/out.parquet")).unwrap()).finish().unwrap();
    let rej = ParquetReader::new(std::fs::File::open(d.join("out/out.rejects.parquet")).unwrap()).finish().unwrap();
    // No row disappears: out + rejects = in.
    assert_eq!(df.height() + rej.height(), 5);
    assert_eq!(df.height(), 2);
    let reasons: Vec<String> = rej.column("reason").unwrap().str().unwrap().iter().map(|s| s.unwrap().to_string()).collect();
    assert!(reasons.iter().any(|r| r.contains("before 1972")), "{reasons:?}");
    assert!(reasons.iter().any(|r| r.contains("mjd_frac out of range")), "{reasons:?}");
    assert!(reasons.iter().any(|r| r.contains("leap-second window")), "{reasons:?}");
    // Pass-through column survives, computed columns present.
    assert!(df.column("note").is_ok() && df.column("tdb_mjd_frac").is_ok() && df.column("tdb_minus_tt_s").is_ok());
    // The leap-second row: TT − UTC label difference is 68.184 s.
    let tt_utc = df.column("tt_minus_utc_s").unwrap().f64().unwrap().get(0).unwrap();
    assert!((tt_utc - 68.184).abs() < 1e-12, "{tt_utc}");
}

#[test]
fn pipeline_errors_are_clean() {
    let d = tmpdir("pipeline-errors");
    write_epochs(&d.join("in.parquet"), &["a", "a"], &[58_000, 58_001], &[0.1, 0.2]);
    let p = write_pipeline(&d, "kind = \"timescales\"\n[input]\npath = \"in.parquet\"\n[output]\npath = \"o.parquet\"\n");
    assert_clean_error(&lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]), "duplicate obs_id 'a'");
    let p = write_pipeline(&d, "kind = \"timescales\"\n[input]\npath = \"in.parquet\"\nbogus = 1\n[output]\npath = \"o.parquet\"\n");
    assert_clean_error(&lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]), "bogus");
    let p = write_pipeline(&d, "kind = \"astrology\"\n");
    assert_clean_error(&lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]), "unknown kind 'astrology'");
    let p = write_pipeline(&d, "kind = \"timescales\"\n[input]\npath = \"missing.parquet\"\n[output]\npath = \"o.parquet\"\n");
    assert_clean_error(&lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]), "missing.parquet");
    std::fs::write(d.join("junk.parquet"), b"PAR1 this is not parquet").unwrap();
    let p = write_pipeline(&d, "kind = \"timescales\"\n[input]\npath = \"junk.parquet\"\n[output]\npath = \"o.parquet\"\n");
    assert_clean_error(&lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]), "junk.parquet");
    // A mistyped column names file and column.
    let mut df = df!("obs_id" => ["x"], "mjd_day" => ["58000"], "mjd_frac" => [0.5]).unwrap();
    ParquetWriter::new(std::fs::File::create(d.join("typed.parquet")).unwrap()).finish(&mut df).unwrap();
    let p = write_pipeline(&d, "kind = \"timescales\"\n[input]\npath = \"typed.parquet\"\n[output]\npath = \"o.parquet\"\n");
    assert_clean_error(&lapse(&["run", "--max-rejected-fraction", "1", p.to_str().unwrap()]), "column 'mjd_day' has type");
    assert_clean_error(&lapse(&["run", "--max-rejected-fraction", "1", "/no/such/pipeline.toml"]), "/no/such/pipeline.toml");
}

#[test]
fn kernels_lists_de421_and_refuses_corrupt_files() {
    let o = lapse(&["kernels", &data("data/de421.bsp")]);
    let (out, err) = text(&o);
    assert_eq!(o.status.code(), Some(0), "{err}");
    assert!(out.contains("EARTH (399)") && out.contains("EARTH BARYCENTER (3)") && out.contains("2053-10-09"), "{out}");
    let d = tmpdir("kernels");
    let bytes = std::fs::read(data("data/de421.bsp")).unwrap();
    let cut = d.join("cut.bsp");
    std::fs::write(&cut, &bytes[..5000]).unwrap();
    assert_clean_error(&lapse(&["kernels", cut.to_str().unwrap()]), "cut.bsp");
    let junk = d.join("junk.bsp");
    std::fs::write(&junk, b"DAF/SPK junk junk junk").unwrap();
    assert_clean_error(&lapse(&["kernels", junk.to_str().unwrap()]), "junk.bsp");
    assert_clean_error(&lapse(&["kernels", "/no/such.bsp"]), "/no/such.bsp");
}

#[test]
fn site_term_and_ut1_through_the_binary() {
    let site = ["--site", "HARRIER-2", "--stations", &data("data/demo/stations.toml"), "--kernel", &data("data/de421.bsp"), "--eop", &data("data/finals2000A.all")];
    let mut args = vec!["time", "2024-03-20T03:06:00", "--to", "tdb,ut1"];
    args.extend(site.iter().copied());
    let o = lapse(&args);
    let (out, err) = text(&o);
    assert_eq!(o.status.code(), Some(0), "{err}");
    // Regression value for the invented station (its position moved with the
    // demo's stations); within the bound |v_E|·|x|/c² ≤ 2.1e-6 s (30 km/s,
    // 6.4e6 m; common practice).
    assert!(out.contains("# site HARRIER-2: topocentric TDB − TT = -5.4102"), "{out}");
    // UT1 − UTC = −9.19 ms on 2024-03-20 (IERS Bulletin B values in finals2000A.all).
    assert!(out.contains("ut1  2024-03-20T03:05:59.9908"), "{out}");
    let o = lapse(&["time", "2026-12-20", "--to", "ut1", "--eop", &data("data/finals2000A.all")]);
    assert!(text(&o).0.contains("PREDICTED"), "{}", text(&o).0);
    assert_clean_error(&lapse(&["time", "2024-03-20", "--to", "ut1"]), "UT1 needs Earth-orientation data");
}

#[test]
fn geometry_bad_inputs_are_clean_errors() {
    let d = tmpdir("geometry-bad");
    let stations = data("data/demo/stations.toml");
    let base = ["time", "2024-03-20", "--to", "tdb", "--kernel", &data("data/de421.bsp"), "--eop", &data("data/finals2000A.all")];
    // Unknown station code.
    let mut a = base.to_vec();
    a.extend(["--site", "NOPE", "--stations", &stations]);
    assert_clean_error(&lapse(&a), "unknown station 'NOPE'");
    // A station with a non-finite coordinate, and one in orbit.
    let bad = d.join("bad.toml");
    std::fs::write(&bad, "[[station]]\ncode = \"X\"\nitrf_m = [nan, 0.0, 0.0]\n").unwrap();
    let mut a = base.to_vec();
    a.extend(["--site", "X", "--stations", bad.to_str().unwrap()]);
    assert_clean_error(&lapse(&a), "not finite");
    std::fs::write(&bad, "[[station]]\ncode = \"X\"\nitrf_m = [7000000.0, 0.0, 0.0]\n").unwrap();
    assert_clean_error(&lapse(&a), "km from the GRS80");
    // An EOP file with a malformed line.
    let text_eop = std::fs::read_to_string(data("data/finals2000A.all")).unwrap();
    let mut lines: Vec<String> = text_eop.lines().map(str::to_string).collect();
    lines[9] = lines[9].replacen("0.", "0x", 1);
    let eop = d.join("finals.bad");
    std::fs::write(&eop, lines.join("\n")).unwrap();
    assert_clean_error(&lapse(&["time", "2024-03-20", "--to", "ut1", "--eop", eop.to_str().unwrap()]), "line 10");
    // Outside the EOP table.
    assert_clean_error(&lapse(&["time", "2030-01-01", "--to", "ut1", "--extend-leaps", "--eop", &data("data/finals2000A.all")]), "outside the table");
}

#[test]
fn corrupt_parquet_inputs_are_clean_errors() {
    // Truncations and byte changes of a valid file, through every command
    // that reads Parquet: exit 2, the file named, no panic text.
    let d = tmpdir("corrupt-parquet");
    let good = std::fs::read(Path::new(env!("CARGO_MANIFEST_DIR")).join("data/demo/epochs.parquet")).unwrap();
    let mut variants: Vec<Vec<u8>> = vec![good[..good.len() / 2].to_vec(), good[..good.len() - 9].to_vec(), good[..100].to_vec()];
    for k in [20usize, 400, 3000, good.len() - 40, good.len() - 200] {
        let mut v = good.clone();
        v[k] ^= 0x5a;
        v[k + 1] = 0xff;
        variants.push(v);
    }
    for (i, v) in variants.iter().enumerate() {
        let f = d.join(format!("bad{i}.parquet"));
        std::fs::write(&f, v).unwrap();
        let p = write_pipeline(&d, &format!("kind = \"timescales\"\n[input]\npath = \"bad{i}.parquet\"\n[output]\npath = \"o{i}.parquet\"\n"));
        for args in [vec!["run", p.to_str().unwrap()], vec!["provenance", f.to_str().unwrap()], vec!["diff", f.to_str().unwrap(), f.to_str().unwrap()]] {
            let o = lapse(&args);
            let (out, err) = text(&o);
            // A byte change may leave the file readable: then it must simply work.
            if o.status.code() == Some(0) || o.status.code() == Some(1) {
                continue;
            }
            assert_eq!(o.status.code(), Some(2), "{args:?}: {out}{err}");
            assert!(err.contains(&format!("bad{i}.parquet")), "{args:?}: {err}");
            assert!(!err.contains("panicked"), "{args:?}: {err}");
        }
    }
}
