//! Cost of the geometry kernels: ephemeris evaluation, time conversion, the
//! celestial pole (direct series vs grid) and a full station state.
//!
//! `cargo bench --bench geometry` (release profile). Numbers are per call,
//! one thread; compare ratios measured in one run.

use std::hint::black_box;
use std::path::Path;

use criterion::{Criterion, criterion_group, criterion_main};
use lapse::earth::{CipGrid, CipXys, EarthModel, EopTable, StationCatalog};
use lapse::ephemeris::{Ephemeris, TdbSeconds};
use lapse::time::{TimeScale, TimeScales};

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn bench(c: &mut Criterion) {
    let eph = Ephemeris::load(&[root().join("data/de421.bsp")]).unwrap();
    let ts = TimeScales::builtin();
    let eop = EopTable::from_file(&root().join("data/finals2000A.all")).unwrap();
    let direct = EarthModel::new(ts.clone(), eop.clone());
    let grid = EarthModel::new(ts.clone(), eop).with_cip_grid(60_000.0, 60_030.0);
    let cat = StationCatalog::from_file(&root().join("data/demo/stations.toml")).unwrap();
    let st = cat.get("HARRIER-2").unwrap().clone();
    let mut k = 0u64;
    let mut next_utc = || {
        k += 1;
        ts.epoch_from_mjd(TimeScale::Utc, 60_000 + (k % 29) as i64, ((k * 7919) % 1000) as f64 / 1000.0).unwrap()
    };

    c.bench_function("ephemeris: Earth wrt SSB (2 segments)", |b| {
        let mut t = 0i64;
        b.iter(|| {
            t += 61;
            black_box(eph.state_ssb(399, &TdbSeconds::new(7.6e8 as i64 + t, 0.25)).unwrap())
        })
    });
    c.bench_function("time: UTC → TDB (geocentric)", |b| b.iter_batched(&mut next_utc, |e| black_box(ts.convert(e, TimeScale::Tdb, 0.0).unwrap()), criterion::BatchSize::SmallInput));
    c.bench_function("pole: X, Y, s direct (IAU 2006/2000A)", |b| {
        let mut d = 0.0;
        b.iter(|| {
            d += 0.013;
            black_box(CipXys::direct(2_400_000.5, 60_000.0 + d % 29.0))
        })
    });
    let g = CipGrid::new(60_000.0, 60_030.0, lapse::earth::CIP_GRID_STEP_DAY);
    c.bench_function("pole: X, Y, s from grid", |b| {
        let mut d = 0.0;
        b.iter(|| {
            d += 0.013;
            black_box(g.at(60_000.0 + d % 29.0).unwrap())
        })
    });
    c.bench_function("station state: direct", |b| b.iter_batched(&mut next_utc, |e| black_box(direct.station_state(&eph, &st, &e).unwrap()), criterion::BatchSize::SmallInput));
    c.bench_function("station state: grid", |b| b.iter_batched(&mut next_utc, |e| black_box(grid.station_state(&eph, &st, &e).unwrap()), criterion::BatchSize::SmallInput));
}

criterion_group! {
    name = benches;
    config = Criterion::default().sample_size(30).measurement_time(std::time::Duration::from_secs(2)).warm_up_time(std::time::Duration::from_millis(500));
    targets = bench
}
criterion_main!(benches);
