//! Speed of `tragus replay`: a store of 24 demo units (Ember E2, line 3 station 1, a mix of
//! good and defective simulated units) judged again under the same plan, on one thread and
//! on every core. Throughput is in units (records) per second, set-up included (archived
//! inputs read, the plan prepared per station, one analyzer per thread).

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use std::hint::black_box;
use std::path::Path;
use tragus::bench::replay::{replay, ReplayOptions};
use tragus::bench::{load_station, Bench, BenchOptions};

const UNITS: usize = 24;
const KINDS: [&str; 6] = [
    "nominal",
    "seal-leak",
    "nominal",
    "rub",
    "low-sensitivity",
    "nominal",
];

/// The demo store, tested by the engine itself into `store`.
fn demo_store(root: &Path, store: &Path) {
    let plan = root.join("plans/demo-earbud.yaml");
    let station = load_station(&root.join("stations/line3-st1.yaml")).expect("station");
    let mut bench = Bench::new(BenchOptions {
        plan: &plan,
        station: Some(&station),
        fixture: None,
        rig: None,
        store: Some(store.to_path_buf()),
        station_id: None,
        operator: Some("bench".into()),
        calibration: None,
        non_production: false,
        soundcard: Default::default(),
        record_refusals: false,
    })
    .expect("bench");
    for i in 0..UNITS {
        let serial = format!("E2-{:06}", 7000 + i);
        let sim = bench
            .sim_choice(KINDS[i % KINDS.len()], None)
            .expect("unit");
        bench
            .test_and_record(&serial, &sim, &|| false, &|_| None)
            .unwrap_or_else(|_| panic!("{serial} not recorded"));
    }
}

fn bench(c: &mut Criterion) {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let tmp = tempfile::tempdir().expect("tmp");
    let store = tmp.path().join("store");
    demo_store(root, &store);
    let plan = root.join("plans/demo-earbud.yaml");
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let mut group = c.benchmark_group("replay");
    group.sample_size(10);
    group.throughput(Throughput::Elements(UNITS as u64));
    for jobs in [1, cores] {
        let options = ReplayOptions {
            jobs: Some(jobs),
            ..ReplayOptions::default()
        };
        group.bench_function(format!("{UNITS} demo units, {jobs} thread(s)"), |b| {
            b.iter(|| {
                let report = replay(&store, &plan, &options).expect("replay");
                assert_eq!(report.n_replayed, UNITS);
                black_box(report)
            })
        });
    }
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
