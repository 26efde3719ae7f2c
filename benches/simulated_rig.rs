//! Speed of the simulated rig v2: one unit (2 channels, 48 kHz, the demo sweep at
//! −12 dBFS, 1.5 s capture) through the physical earphone in the demo fixture, after the
//! rig is built and the fixture's per-frequency tables are cached (the per-unit cost).

use criterion::{criterion_group, criterion_main, Criterion};
use std::hint::black_box;
use std::path::Path;
use tragus::dsp::sweep::{Stimulus, SweepParams};
use tragus::models::coupler::load_model;
use tragus::rig::simulated::{PhysicalPopulation, SimUnit, UnitKind};
use tragus::rig::Rig;

fn bench(c: &mut Criterion) {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let fixture = load_model(&root.join("reference/couplers/fixture-line3-a.yaml"))
        .expect("fixture")
        .coupler();
    let pop = PhysicalPopulation::new(fixture, "mic").expect("tap");
    // The demo sweep (20 Hz–20 kHz, −12 dBFS, 0.1 s before), padded to 1.5 s.
    let sweep = SweepParams::synchronized(
        48_000,
        20.0,
        20_000.0,
        1.0,
        10f64.powf(-12.0 / 20.0),
        0.005,
        0.005,
        0.1,
    )
    .expect("sweep");
    let n_after = 72_000 - sweep.start_sample - sweep.n_sweep_samples;
    let stim = Stimulus::build(sweep, n_after, 2, &[0, 1]);
    let routes = vec![(0, 0), (1, 1)];
    let unit = |k: u64| SimUnit {
        serial: format!("E2-{k:06}"),
        kind: UnitKind::Nominal,
        defect_channel: 0,
    };
    // Warm the fixture's cache (tables and FFT plans for this length).
    pop.rig(routes.clone(), 1, unit(0))
        .play_and_capture(&stim, 2)
        .expect("capture");
    let mut k = 0u64;
    let mut group = c.benchmark_group("simulated rig v2");
    group.sample_size(20);
    group.bench_function("one unit, 2 channels, 1.5 s at 48 kHz", |b| {
        b.iter(|| {
            k += 1;
            let mut rig = pop.rig(routes.clone(), 1, unit(k));
            black_box(rig.play_and_capture(black_box(&stim), 2).expect("capture"))
        })
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
