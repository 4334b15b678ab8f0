//! One target that feeds the same bytes to every reader of outside files
//! (pipeline TOML, station catalogue, clock table, EOP text, leap seconds,
//! OEM, SPK, Parquet whole and in slices); none may panic.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data).into_owned();
    let p = Path::new("fuzz");
    if let Ok(f) = lapse::pipeline::PipelineFile::from_text(text.clone(), p) {
        let _ = f.parse::<lapse::kinds::pulsar::PulsarPipeline>();
        let _ = f.parse::<lapse::kinds::tracking::TrackingPipeline>();
        let _ = f.parse::<lapse::kinds::timescales::TimescalesPipeline>();
    }
    let _ = lapse::earth::StationCatalog::parse(&text, p);
    let _ = lapse::pulsar::clock::ClockTable::parse(&text, p);
    let _ = lapse::earth::EopTable::parse(&text, p);
    let _ = lapse::time::LeapSecondTable::parse(&text, p);
    let _ = lapse::ephemeris::oem::parse_oem(&text, p, -5, &lapse::time::TimeScales::builtin());
    let _ = lapse::ephemeris::SpkKernel::parse(data, p);
    // Parquet: whole, row count, slices.
    let f = std::env::temp_dir().join(format!("lapse-fuzz-{}.parquet", std::process::id()));
    if std::fs::write(&f, data).is_ok() {
        let _ = lapse::io::read_parquet(&f);
        let _ = lapse::io::read_parquet_metadata(&f);
        if let Ok(n) = lapse::pipeline::table::parquet_rows(&f) {
            let _ = lapse::pipeline::table::read_parquet_slice(&f, n / 2, 97, None);
        }
    }
});
