//! Speed of the simulated station path: one demo unit (plans/demo-earbud.yaml on
//! stations/line3-st1.yaml, 2 channels) through `Bench::test_unit` — pilot, guarded sweep
//! through the physical earphone in fixture A, analysis, correction, checks — with the
//! fixture's per-frequency tables made once per line (as the bench does), and, for
//! comparison, rebuilt for every unit (as the bench did before issue 13).

use criterion::{criterion_group, criterion_main, Criterion};
use std::hint::black_box;
use std::path::Path;
use tragus::bench::{load_station, Bench, BenchOptions};
use tragus::rig::simulated::PhysicalPopulation;

fn bench(c: &mut Criterion) {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let station = load_station(&root.join("stations/line3-st1.yaml")).expect("station");
    let plan = root.join("plans/demo-earbud.yaml");
    let mut b = Bench::new(BenchOptions {
        plan: &plan,
        station: Some(&station),
        fixture: None,
        rig: None,
        store: None,
        station_id: None,
        operator: Some("bench".into()),
        calibration: None,
        non_production: true,
        soundcard: Default::default(),
        record_refusals: false,
    })
    .expect("bench");
    let sim = b.sim_choice("nominal", None).expect("unit");
    let corr = b.prep.plan.channels[0]
        .correction
        .clone()
        .expect("corrected");
    let (coupler, tap) = (corr.fixture.coupler(), corr.fixture_tap.clone());
    let earphone = b.prep.plan.simulated_earphone().expect("product");
    let (model, spread) = (earphone.model.clone(), earphone.spread.copied());
    // The first unit makes the tables.
    b.test_unit("E2-000000", &sim, &|_| None).expect("unit");
    let mut k = 0u64;
    let mut group = c.benchmark_group("simulated station path");
    group.sample_size(10);
    group.bench_function("one demo unit, fixture tables once per line", |bn| {
        bn.iter(|| {
            k += 1;
            black_box(
                b.test_unit(&format!("E2-{k:06}"), &sim, &|_| None)
                    .expect("unit"),
            )
        })
    });
    group.bench_function("one demo unit, fixture tables rebuilt per unit", |bn| {
        bn.iter(|| {
            k += 1;
            let fresh =
                PhysicalPopulation::of_product(coupler.clone(), &tap, &model, spread.as_ref())
                    .expect("population");
            b.share_population(Some(fresh));
            black_box(
                b.test_unit(&format!("E2-{k:06}"), &sim, &|_| None)
                    .expect("unit"),
            )
        })
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
