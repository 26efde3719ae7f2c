//! Speed of the acoustic models: a coupler evaluated, and a fixture→reference correction
//! computed, on 1000 log-spaced frequencies (issue 3's benchmark).

use criterion::{criterion_group, criterion_main, Criterion};
use std::hint::black_box;
use std::path::Path;
use tragus::acoustics::air::Air;
use tragus::acoustics::correction::Correction;
use tragus::acoustics::source::{EarphoneModel, Source};
use tragus::models::coupler::load_model;

fn freqs() -> Vec<f64> {
    (0..1000)
        .map(|i| 20.0 * 1000f64.powf(i as f64 / 999.0))
        .collect()
}

fn bench(c: &mut Criterion) {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("reference/couplers");
    let fixture = load_model(&root.join("fixture-line3-a.yaml")).expect("fixture");
    let reference_model = load_model(&root.join("occluded-ear.yaml")).expect("reference");
    let reference = reference_model.coupler();
    let f = freqs();
    c.bench_function("coupler evaluate, 1000 frequencies (occluded ear)", |b| {
        b.iter(|| black_box(reference.evaluate_many(black_box(&f))))
    });
    let source = Source::VirtualEarphone(EarphoneModel::demo(Air::standard()));
    let corr =
        Correction::new(&fixture, &reference_model, "mic", "eardrum", &source).expect("taps");
    c.bench_function("correction factor, 1000 frequencies", |b| {
        b.iter(|| {
            for &x in &f {
                black_box(corr.factor(x).expect("factor"));
            }
        })
    });
}

criterion_group! {
    name = benches;
    config = Criterion::default().sample_size(30);
    targets = bench
}
criterion_main!(benches);
