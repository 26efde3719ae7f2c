//! Speed of the per-unit analysis: one 1 s, 48 kHz, two-channel capture of the demo plan,
//! deconvolved, corrected from the fixture to the reference coupler and judged with the
//! demo check set. The analyzer and the correction tables are built once (as a station
//! does) and reused, so this measures the per-unit hot path.
//! Target (issue 2): ≤ 5 ms on one core of the project machine.

use criterion::{criterion_group, criterion_main, Criterion};
use std::hint::black_box;
use std::path::Path;
use tragus::analysis::Analyzer;
use tragus::correction::PlanCorrections;
use tragus::dsp::sweep::Stimulus;
use tragus::rig::simulated::{SimUnit, SimulatedRig, UnitKind};
use tragus::rig::Rig;

fn bench_analysis(c: &mut Criterion) {
    let plan = tragus::plan::load_plan(Path::new(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/plans/demo-earbud.yaml"
    )))
    .expect("demo plan");
    let stimulus = Stimulus::from_plan(&plan).expect("stimulus");
    let routes = plan.channels.iter().map(|c| (c.output, c.input)).collect();
    let mut rig = SimulatedRig::new(
        routes,
        7,
        SimUnit {
            serial: "E2-BENCH".into(),
            kind: UnitKind::Nominal,
            defect_channel: 0,
        },
    );
    let capture = rig
        .play_and_capture(&stimulus, plan.n_inputs())
        .expect("capture");
    let mut analyzer = Analyzer::new(&plan, &stimulus).expect("analyzer");
    let corrections = PlanCorrections::new(&plan, &analyzer).expect("corrections");
    assert!(corrections.any(), "the demo plan corrects its channels");
    c.bench_function("analyze+correct+judge demo unit (2 ch, 1 s, 48 kHz)", |b| {
        b.iter(|| {
            let mut m = analyzer
                .analyze(black_box(&capture), &plan.channels)
                .expect("analysis");
            corrections.apply(&mut m);
            black_box(tragus::checks::judge(&plan, &m))
        })
    });
    let measured = analyzer
        .analyze(&capture, &plan.channels)
        .expect("analysis");
    c.bench_function("analyze only (2 ch)", |b| {
        b.iter(|| black_box(analyzer.analyze(black_box(&capture), &plan.channels)))
    });
    c.bench_function("correct only (2 ch, tables built)", |b| {
        b.iter_batched(
            || measured.clone(),
            |mut m| {
                corrections.apply(&mut m);
                m
            },
            criterion::BatchSize::SmallInput,
        )
    });
    c.bench_function("correction set-up (once per plan)", |b| {
        b.iter(|| black_box(PlanCorrections::new(&plan, &analyzer).expect("corrections")))
    });
    c.bench_function("judge only (demo check set)", |b| {
        b.iter(|| black_box(tragus::checks::judge(&plan, black_box(&measured))))
    });
    c.bench_function("analyzer set-up (once per plan)", |b| {
        b.iter(|| black_box(Analyzer::new(&plan, &stimulus).expect("analyzer")))
    });
}

criterion_group! {
    name = benches;
    config = Criterion::default().sample_size(30);
    targets = bench_analysis
}
criterion_main!(benches);
