//! Speed of the per-unit analysis: 48 kHz, two-channel captures of the demo plan,
//! deconvolved, corrected from the fixture to the reference coupler and judged with the
//! demo check set. The analyzer and the correction tables are built once (as a station or
//! a replay does) and reused, so this measures the per-unit hot path.
//!
//! Groups: the 1 s demo unit (whole path and each part); what skipping outputs no check
//! reads saves; 4 s and 8 s sweeps (compare their ratio to the 1 s time with N log N, N the
//! capture length, printed at start); a batch judged by a rayon pool of 1 and 2 threads,
//! each thread with its own clone of the analyzer (units per second). Numbers and method:
//! docs/engineer/speed.md.

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use rayon::prelude::*;
use std::hint::black_box;
use std::path::Path;
use tragus::analysis::{Analyzer, Outputs};
use tragus::correction::PlanCorrections;
use tragus::dsp::sweep::Stimulus;
use tragus::plan::Plan;
use tragus::rig::simulated::{Defect, SimUnit, SimulatedRig, UnitKind};
use tragus::rig::{Capture, Rig};

/// The demo plan with a sweep of `duration_s` (the demo's is 1 s).
fn demo_plan(duration_s: f64) -> Plan {
    let mut plan = tragus::plan::load_plan(Path::new(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/plans/demo-earbud.yaml"
    )))
    .expect("demo plan");
    plan.stimulus.duration_s = duration_s;
    plan
}

/// A capture of one simulated unit through `plan`'s stimulus.
fn capture(plan: &Plan, stimulus: &Stimulus, kind: UnitKind, seed: u64) -> Capture {
    let routes = plan.channels.iter().map(|c| (c.output, c.input)).collect();
    let unit = SimUnit {
        serial: format!("E2-{:06}", 900 + seed),
        kind,
        defect_channel: 1,
    };
    SimulatedRig::new(routes, seed, unit)
        .play_and_capture(stimulus, plan.n_inputs())
        .expect("capture")
}

/// Everything a station builds once per plan.
struct Setup {
    plan: Plan,
    stimulus: Stimulus,
    analyzer: Analyzer,
    corrections: PlanCorrections,
}

fn setup(duration_s: f64) -> Setup {
    let plan = demo_plan(duration_s);
    let stimulus = Stimulus::from_plan(&plan).expect("stimulus");
    let analyzer = Analyzer::new(&plan, &stimulus).expect("analyzer");
    let corrections = PlanCorrections::new(&plan, &analyzer).expect("corrections");
    assert!(corrections.any(), "the demo plan corrects its channels");
    Setup {
        plan,
        stimulus,
        analyzer,
        corrections,
    }
}

/// Analyse, correct and judge one unit (what `Prepared::judge_capture` does, less the
/// result's bookkeeping).
fn judge(an: &mut Analyzer, s: &Setup, cap: &Capture) -> tragus::Verdict {
    let mut m = an.analyze(cap, &s.plan.channels).expect("analysis");
    s.corrections.apply(&mut m);
    tragus::checks::judge(&s.plan, &m).1
}

fn bench_demo_unit(c: &mut Criterion) {
    let mut s = setup(1.0);
    let cap = capture(&s.plan, &s.stimulus, UnitKind::Nominal, 7);
    let mut an = s.analyzer.clone();
    c.bench_function("analyze+correct+judge demo unit (2 ch, 1 s, 48 kHz)", |b| {
        b.iter(|| judge(&mut an, &s, black_box(&cap)))
    });
    let measured = an.analyze(&cap, &s.plan.channels).expect("analysis");
    c.bench_function("analyze only (2 ch)", |b| {
        b.iter(|| black_box(an.analyze(black_box(&cap), &s.plan.channels)))
    });
    c.bench_function("correct only (2 ch, tables built)", |b| {
        b.iter_batched(
            || measured.clone(),
            |mut m| {
                s.corrections.apply(&mut m);
                m
            },
            criterion::BatchSize::SmallInput,
        )
    });
    c.bench_function("correction set-up (once per plan)", |b| {
        b.iter(|| black_box(PlanCorrections::new(&s.plan, &s.analyzer).expect("corrections")))
    });
    c.bench_function("judge only (demo check set)", |b| {
        b.iter(|| black_box(tragus::checks::judge(&s.plan, black_box(&measured))))
    });
    c.bench_function("analyzer set-up (once per plan)", |b| {
        b.iter(|| black_box(Analyzer::new(&s.plan, &s.stimulus).expect("analyzer")))
    });
    c.bench_function("analyzer clone (once per thread)", |b| {
        b.iter(|| black_box(s.analyzer.clone()))
    });

    // What the outputs cost: a plan without rub-and-buzz checks skips step 5, one without
    // distortion checks steps 3–5 (Outputs::for_checks).
    let mut group = c.benchmark_group("analyze only, by outputs (2 ch, 1 s)");
    for (name, outputs) in [
        ("all", Outputs::ALL),
        (
            "no rub and buzz",
            Outputs {
                harmonics: true,
                rub_buzz: false,
            },
        ),
        (
            "response only",
            Outputs {
                harmonics: false,
                rub_buzz: false,
            },
        ),
    ] {
        s.analyzer.set_outputs(outputs);
        let mut an = s.analyzer.clone();
        group.bench_function(name, |b| {
            b.iter(|| black_box(an.analyze(black_box(&cap), &s.plan.channels)))
        });
    }
    group.finish();
}

fn bench_sweep_lengths(c: &mut Criterion) {
    let mut group = c.benchmark_group("analyze+correct+judge by sweep length (2 ch)");
    group.sample_size(10);
    let mut base = None;
    for duration_s in [1.0, 4.0, 8.0] {
        let s = setup(duration_s);
        let cap = capture(&s.plan, &s.stimulus, UnitKind::Nominal, 7);
        let n = cap.channels[0].len() as f64;
        let nlogn = n * n.log2();
        let b0 = *base.get_or_insert(nlogn);
        eprintln!(
            "sweep {duration_s} s: capture {n} samples; N log N predicts {:.2}× the 1 s time",
            nlogn / b0
        );
        let mut an = s.analyzer.clone();
        group.bench_with_input(
            BenchmarkId::from_parameter(format!("{duration_s} s")),
            &cap,
            |b, cap| b.iter(|| judge(&mut an, &s, black_box(cap))),
        );
    }
    group.finish();
}

fn bench_threads(c: &mut Criterion) {
    let s = setup(1.0);
    let kinds = [
        UnitKind::Nominal,
        UnitKind::Nominal,
        UnitKind::Nominal,
        UnitKind::Defect(Defect::Rub),
        UnitKind::Defect(Defect::HeavyDistortion),
        UnitKind::Defect(Defect::LowSensitivity),
        UnitKind::Nominal,
        UnitKind::Nominal,
    ];
    let caps: Vec<Capture> = (0..32)
        .map(|i| capture(&s.plan, &s.stimulus, kinds[i % kinds.len()], i as u64))
        .collect();
    let mut group = c.benchmark_group("batch of 32 units, rayon (units/s)");
    group.sample_size(10);
    group.throughput(Throughput::Elements(caps.len() as u64));
    let idle = std::sync::Mutex::new(Vec::<Analyzer>::new());
    for threads in [1usize, 2] {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("thread pool");
        group.bench_function(
            BenchmarkId::from_parameter(format!("{threads} thread(s)")),
            |b| {
                b.iter(|| {
                    pool.install(|| {
                        caps.par_chunks(4)
                            .map(|chunk| {
                                // Analyzers are reused from batch to batch, as replay does.
                                let taken = idle.lock().expect("pool").pop();
                                let mut an = taken.unwrap_or_else(|| s.analyzer.clone());
                                let passed = chunk
                                    .iter()
                                    .filter(|cap| judge(&mut an, &s, cap) == tragus::Verdict::Pass)
                                    .count();
                                idle.lock().expect("pool").push(an);
                                passed
                            })
                            .sum::<usize>()
                    })
                })
            },
        );
    }
    group.finish();
}

criterion_group! {
    name = benches;
    config = Criterion::default().sample_size(30);
    targets = bench_demo_unit, bench_sweep_lengths, bench_threads
}
criterion_main!(benches);
