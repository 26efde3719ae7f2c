//! The virtual line (issue 13, part 3): the plan's own product with its declared spread, a
//! defect mix, fixture tables made once per line, and the line's report (`simulate-line`).

use crate::support::common::{assert_exit, root, tragus};
use std::path::{Path, PathBuf};
use tragus::bench::line::{simulate_line, DefectMix, LineOptions, LineReport};
use tragus::bench::{load_station, Bench, BenchOptions};
use tragus::models::earphone::{load_earphone, load_earphone_file, load_earphone_file_str};
use tragus::rig::simulated::{Defect, SimUnit, UnitKind};
use tragus::Verdict;

fn data(name: &str) -> PathBuf {
    root().join("tests/data/line").join(name)
}

fn bench(plan: &Path) -> Bench {
    let station = load_station(&root().join("stations/line3-st1.yaml")).unwrap();
    Bench::new(BenchOptions {
        plan,
        station: Some(&station),
        fixture: None,
        rig: None,
        store: None,
        station_id: None,
        operator: Some("line-test".into()),
        calibration: None,
        non_production: true,
        soundcard: Default::default(),
        record_refusals: false,
    })
    .unwrap()
}

fn line(plan: &Path, units: usize, mix: &str, seed: u64, jobs: usize) -> LineReport {
    let opts = LineOptions {
        units,
        mix: mix.parse().unwrap(),
        seed: Some(seed),
        serial_prefix: "VL-".into(),
        record: false,
        jobs,
    };
    simulate_line(&|| Ok(bench(plan)), &opts, &mut |_| {}).unwrap()
}

/// Every defect of the simulated population, 2 % of the line each (10 units in 500).
const ALL_DEFECTS: &str = "reversed-polarity=0.02,dead-channel=0.02,low-sensitivity=0.02,\
    resonance-shift=0.02,clipping=0.02,heavy-distortion=0.02,seal-leak=0.02,\
    blocked-damper=0.02,weak-motor=0.02,rub=0.02,too-loud=0.02";

#[test]
fn a_line_of_500_units_catches_every_defect_or_lists_it_as_an_escape() {
    let r = line(&data("plan-short.yaml"), 500, ALL_DEFECTS, 7, 2);
    assert_eq!(r.units, 500);
    assert_eq!(r.unit_results.len(), 500);
    // Largest remainder of 2 % × 500: exactly 10 units per defect, 390 good ones.
    for m in &r.mix {
        assert_eq!(m.units, 10, "{}", m.defect);
    }
    let good = r.unit_results.iter().filter(|u| u.defect == "none").count();
    assert_eq!(good, 390);

    // Every defect unit is caught (its final verdict is not a pass) or listed as an escape
    // with the check that came closest and its margin.
    for u in r.unit_results.iter().filter(|u| u.defect != "none") {
        if u.final_verdict == Verdict::Pass {
            let e = r
                .escapes
                .iter()
                .find(|e| e.serial == u.serial)
                .unwrap_or_else(|| {
                    panic!("{} ({}) passed but is not an escape", u.serial, u.defect)
                });
            let c = e
                .closest
                .as_ref()
                .expect("an escape names its closest check");
            assert!(
                e.reason.contains(&c.check) && e.reason.contains("margin"),
                "{}",
                e.reason
            );
            assert!(c.margin_db >= 0.0);
        } else {
            assert!(r.escapes.iter().all(|e| e.serial != u.serial));
            // A failed unit names its failing checks; a retest has its reasons.
            match u.final_verdict {
                Verdict::Fail => assert!(!u.failed_checks.is_empty(), "{}", u.serial),
                _ => assert!(!u.retest_reasons.is_empty(), "{}", u.serial),
            }
        }
    }
    assert!(r.escapes.iter().all(|e| e.defect != "none"));

    // Predicted yield = units passing / N; first-pass yield from the first tests.
    let passed = r
        .unit_results
        .iter()
        .filter(|u| u.final_verdict == Verdict::Pass)
        .count();
    assert_eq!(r.passed, passed);
    assert_eq!(r.predicted_yield, passed as f64 / 500.0);
    let first = r
        .unit_results
        .iter()
        .filter(|u| u.first_verdict == Verdict::Pass)
        .count();
    assert_eq!(r.first_pass_yield, first as f64 / 500.0);
    assert!(first <= passed);
    // Good units of the demo design pass (the plan's limits are the golden units' ± band):
    // the line is not failing everything.
    let good_passed = r.confusion[0].pass;
    assert!(
        good_passed >= 385,
        "good units passing: {good_passed} of 390"
    );

    // The confusion table's cells sum to N and match the per-unit verdicts.
    let cells: usize = r.confusion.iter().map(|c| c.pass + c.fail + c.retest).sum();
    assert_eq!(cells, 500);
    for row in &r.confusion {
        let of: Vec<_> = r
            .unit_results
            .iter()
            .filter(|u| u.defect == row.defect)
            .collect();
        assert_eq!(row.units, of.len());
        let n = |v: Verdict| of.iter().filter(|u| u.final_verdict == v).count();
        assert_eq!(
            (row.pass, row.fail, row.retest),
            (n(Verdict::Pass), n(Verdict::Fail), n(Verdict::Retest)),
            "{}",
            row.defect
        );
    }
    // The Pareto counts units per failing check, as the units say.
    for p in &r.pareto {
        let n = r
            .unit_results
            .iter()
            .filter(|u| u.failed_checks.contains(&p.check))
            .count();
        assert_eq!(p.units, n, "{}", p.check);
        assert_eq!(p.by_defect.values().sum::<usize>(), n);
    }
    // Physics a test engineer expects of this plan: a reversed unit fails polarity, a
    // leaky one the bass band, a dead channel is never a pass.
    let caught_by = |check: &str, defect: &str| {
        r.pareto
            .iter()
            .find(|p| p.check == check)
            .and_then(|p| p.by_defect.get(defect))
            .copied()
            .unwrap_or(0)
    };
    assert_eq!(caught_by("pol", "reversed-polarity"), 10);
    assert_eq!(caught_by("bass", "seal-leak"), 10);
    let dead = r
        .confusion
        .iter()
        .find(|c| c.defect == "dead-channel")
        .unwrap();
    assert_eq!(dead.pass, 0);
}

#[test]
fn the_same_seed_gives_a_byte_identical_report_whatever_the_workers() {
    let mix = "seal-leak=0.2,rub=0.2,dead-channel=0.1";
    let a = line(&data("plan-short.yaml"), 10, mix, 11, 1);
    let b = line(&data("plan-short.yaml"), 10, mix, 11, 2);
    let (ja, jb) = (
        serde_json::to_string_pretty(&a).unwrap(),
        serde_json::to_string_pretty(&b).unwrap(),
    );
    assert_eq!(ja, jb);
    // The dead unit is retested once (reseated), as an operator would.
    let dead = a
        .unit_results
        .iter()
        .find(|u| u.defect == "dead-channel")
        .unwrap();
    assert_eq!((dead.first_verdict, dead.tests), (Verdict::Retest, 2));
}

#[test]
fn another_seed_gives_other_units() {
    let mix = "seal-leak=0.25,weak-motor=0.25";
    let a = line(&data("plan-short.yaml"), 8, mix, 1, 2);
    let b = line(&data("plan-short.yaml"), 8, mix, 2, 2);
    let placed = |r: &LineReport| -> Vec<String> {
        r.unit_results
            .iter()
            .map(|u| format!("{}:{:?}", u.defect, u.defect_channel))
            .collect()
    };
    assert_ne!(placed(&a), placed(&b), "the defects sit on other units");
    // And the units themselves differ (spread and noise): every unit's closest margin.
    let margins = |r: &LineReport| -> Vec<f64> {
        r.unit_results
            .iter()
            .map(|u| u.closest.as_ref().unwrap().margin_db)
            .collect()
    };
    let (ma, mb) = (margins(&a), margins(&b));
    assert!(ma.iter().zip(&mb).all(|(x, y)| x != y), "{ma:?} {mb:?}");
}

/// The response (corrected to the reference coupler) of the design unit of `plan`'s
/// product, left channel.
fn design_response(plan: &Path) -> (Vec<f64>, Vec<f64>) {
    let mut b = bench(plan);
    let sim = b.sim_choice("design", None).unwrap();
    let o = b.test_unit("E2-000001", &sim, &|_| None).unwrap();
    let m = &o.result.channels[0];
    (m.frequencies_hz.clone(), m.response_db.clone())
}

#[test]
fn a_plan_naming_another_earphone_changes_the_sensitivity_by_the_analytic_amount() {
    // The rewound coil (tests/data/line/rewound-e2.yaml): turns ×2 in the same winding space,
    // so Bl ×2, Re ×4, Le ×4. The force on the diaphragm is Bl·e/Ze and the motor's
    // electrical damping Bl²/Ze (Beranek & Mellow, Acoustics: Sound Fields and Transducers,
    // 2012, ch. 3, the moving-coil driver's equivalent circuit; from memory): the damping is
    // unchanged and the force halves at every frequency, so the sound pressure in any load
    // falls by 20·log10(2) = 6.0206 dB, in the mass-controlled band and everywhere else.
    let expected_db = -20.0 * 2f64.log10();
    let (f, base) = design_response(&data("plan-short.yaml"));
    let (f2, rewound) = design_response(&data("plan-rewound.yaml"));
    assert_eq!(f, f2);
    let mut n = 0;
    for ((hz, a), b) in f.iter().zip(&base).zip(&rewound) {
        let d = b - a;
        // Up to 2 kHz the response is within 21 dB of its peak: 0.01 dB holds the motor's
        // nonlinearity (its compression of the fundamental changes with the halved
        // excursion, ≈ 0.003 dB here). Above, the response falls 25–45 dB and the converter
        // noise (−96 dBFS, a 0.25 s sweep) moves single points by a few hundredths of a dB
        // (by more than 0.1 dB beyond 5 kHz, where it is 40 dB down).
        let tol = match *hz {
            h if (100.0..=2_000.0).contains(&h) => 0.01,
            h if (2_000.0..=5_000.0).contains(&h) => 0.1,
            _ => continue,
        };
        assert!((d - expected_db).abs() < tol, "{hz:.0} Hz: {d:.4} dB");
        n += 1;
    }
    assert!(n > 100);
    // The plan says which file it simulates.
    let p = tragus::bench::load(&data("plan-rewound.yaml")).unwrap();
    let e = p.simulated_earphone().unwrap();
    assert_eq!(e.named_by, "product.earphone");
    assert_eq!(e.model.bl_t_m, 1.0);
}

#[test]
fn product_earphone_and_spread_leave_the_plan_hash_and_the_correction_identity_alone() {
    let load = |n: &str| tragus::bench::load(&data(n)).unwrap();
    let none = load("plan-product-none.yaml");
    // Another product file, with or without a spread: the same plan hash (it changes what a
    // simulation draws, not how a capture is judged).
    for n in [
        "plan-product-e2.yaml",
        "plan-rewound.yaml",
        "plan-spread.yaml",
    ] {
        assert_eq!(load(n).sha256, none.sha256, "{n}");
    }
    // The spread is not part of the earphone's canonical form (the correction identity).
    let demo = load_earphone(&root().join("reference/earphones/ember-e2.yaml")).unwrap();
    let spread = load_earphone_file(&data("spread-e2.yaml")).unwrap();
    assert!(spread.spread.is_some());
    assert_eq!(spread.model, demo);
    assert_eq!(
        tragus::models::earphone::canonical_json(&spread.model),
        tragus::models::earphone::canonical_json(&demo)
    );
    // The existing plan hashes are unchanged (tests/data/plans/hash pins them; the demo plan's
    // simulated product is its correction's virtual earphone).
    let demo_plan = tragus::bench::load(&root().join("plans/demo-earbud.yaml")).unwrap();
    assert_eq!(
        demo_plan.simulated_earphone().unwrap().named_by,
        "correction.source.virtual_earphone"
    );
}

fn units_of(plan: &str, serials: usize) -> Vec<tragus::rig::simulated::PhysicalParams> {
    let b = bench(&data(plan));
    let pop = b.population().expect("a physical population").clone();
    (0..serials)
        .flat_map(|k| {
            let unit = SimUnit {
                serial: format!("VL-{k:06}"),
                kind: UnitKind::Nominal,
                defect_channel: 0,
            };
            (0..2).map(move |c| (unit.clone(), c))
        })
        .map(|(u, c)| pop.unit_params(5, &u, c))
        .collect()
}

#[test]
fn a_zero_spread_gives_identical_units() {
    let units = units_of("plan-no-spread.yaml", 20);
    let design = &units[0];
    assert!(units.iter().all(|u| u == design));
    // …which is the file's design itself (in the fixture's air), while the demo spread
    // (no `spread:` section) varies every unit.
    let demo = units_of("plan-product-e2.yaml", 3);
    assert!(demo.windows(2).all(|w| w[0] != w[1]));
    assert_eq!(design.model.bl_t_m, 0.5);
}

#[test]
fn a_declared_spread_draws_each_parameter_with_its_sigma() {
    let units = units_of("plan-spread.yaml", 1500);
    let stats = |x: Vec<f64>| {
        let n = x.len() as f64;
        let mean = x.iter().sum::<f64>() / n;
        let var = x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0);
        (mean, var.sqrt())
    };
    // A normal distribution cut at ±3σ has the standard deviation σ·√(1 − 2·3·φ(3)/(2Φ(3) − 1))
    // = 0.98658·σ (truncated normal variance; Johnson, Kotz & Balakrishnan, Continuous
    // Univariate Distributions, vol. 1, 1994, ch. 13; from memory).
    let phi3 = (-4.5f64).exp() / (2.0 * std::f64::consts::PI).sqrt();
    let mass = 0.997_300_203_936_739_8; // 2Φ(3) − 1
    let cut = (1.0 - 6.0 * phi3 / mass).sqrt();
    // 3000 draws: the sample σ has a relative standard error of 1/√(2n) ≈ 1.3 %; 5 % is
    // four of them.
    for (name, values, nominal, sigma) in [
        (
            "bl",
            units.iter().map(|u| u.model.bl_t_m).collect::<Vec<_>>(),
            0.5,
            0.02 * 0.5,
        ),
        (
            "mms",
            units.iter().map(|u| u.model.mms_kg).collect(),
            12e-6,
            0.36e-6,
        ),
        (
            "cms",
            units.iter().map(|u| u.model.cms_m_per_n).collect(),
            53e-3,
            0.08 * 53e-3,
        ),
    ] {
        let (mean, sd) = stats(values.clone());
        assert!(
            (mean - nominal).abs() < 4.0 * sigma / (values.len() as f64).sqrt(),
            "{name}"
        );
        assert!(
            (sd / (sigma * cut) - 1.0).abs() < 0.05,
            "{name}: {sd} vs {}",
            sigma * cut
        );
        assert!(values
            .iter()
            .all(|v| (v - nominal).abs() <= 3.0 * sigma * (1.0 + 1e-12)));
    }
    // Parameters without a declared spread stay nominal.
    assert!(units
        .iter()
        .all(|u| u.model.re_ohm == 24.0 && u.model.sd_m2 == 60e-6));
}

#[test]
fn bad_spread_sections_are_refused_at_their_position() {
    let base = std::fs::read_to_string(root().join("reference/earphones/ember-e2.yaml")).unwrap();
    let lines = base.lines().count();
    let cases = [
        (
            "spread: {bl_t_m: -2%}",
            "spread.bl_t_m: expected a σ of 0 or more",
        ),
        ("spread: {bl_t_m: 40%}", "expected a σ below 33.3%"),
        (
            "spread: {bl_t_m: 0.2}",
            "expected a σ below a third of the nominal 0.5 T·m",
        ),
        (
            "spread: {nonlinearity: 0.1}",
            "spread.nonlinearity: expected a relative σ",
        ),
        (
            "spread: {bl: 2%}",
            "spread: unknown key `bl`, did you mean `bl_t_m`?",
        ),
        ("spread: 3%", "spread: expected a mapping of parameter σ"),
    ];
    for (extra, want) in cases {
        let text = format!("{base}{extra}\n");
        let e = load_earphone_file_str(&text, Path::new("e.yaml")).unwrap_err();
        let msg = e.to_string();
        assert!(msg.contains(want), "{extra}: {msg}");
        assert!(
            msg.starts_with(&format!("e.yaml:{}:", lines + 1)),
            "{extra}: {msg}"
        );
    }
}

#[test]
fn a_bad_product_earphone_is_refused_at_its_position_in_the_plan() {
    let dir = tempfile::tempdir().unwrap();
    let plan = std::fs::read_to_string(data("plan-rewound.yaml")).unwrap();
    let line = plan
        .lines()
        .position(|l| l.trim_start().starts_with("earphone:"))
        .unwrap()
        + 1;
    let plan = plan
        .replace("rewound-e2.yaml", "missing.yaml")
        .replace("../../../", &format!("{}/", root().display()));
    let path = dir.path().join("plan.yaml");
    std::fs::write(&path, plan).unwrap();
    let out = tragus().args(["validate"]).arg(&path).output().unwrap();
    assert_exit(&out, 2);
    let text =
        String::from_utf8_lossy(&out.stdout).to_string() + &String::from_utf8_lossy(&out.stderr);
    assert!(
        text.contains(&format!(
            "plan.yaml:{line}:13: product.earphone: cannot read earphone"
        )),
        "{text}"
    );
}

#[test]
fn bad_defect_mixes_say_what_was_expected() {
    let err = |s: &str| s.parse::<DefectMix>().unwrap_err().to_string();
    assert!(err("rub").contains("expected NAME=FRACTION"));
    assert!(err("rubb=0.1").contains("did you mean \"rub\""));
    assert!(err("rub=1.5").contains("expected a fraction from 0 to 1 for `rub`, found `1.5`"));
    assert!(err("rub=-0.1").contains("expected a fraction from 0 to 1"));
    assert!(err("rub=x").contains("found `x`"));
    assert!(err("rub=0.6,seal-leak=0.6").contains("summing to at most 1"));
    assert!(err("rub=0.1,rub=0.2").contains("`rub` twice"));
    assert!(err("").contains("empty mix"));
    let ok: DefectMix = "rub=0.1, seal-leak=0.05".parse().unwrap();
    assert_eq!(ok.parts, vec![(Defect::Rub, 0.1), (Defect::SealLeak, 0.05)]);
    assert!("none".parse::<DefectMix>().unwrap().parts.is_empty());
    // The command line refuses it before anything loads (exit 2, bad input).
    let out = tragus()
        .args(["simulate-line", "--plan", "plans/demo-earbud.yaml"])
        .args(["--station", "stations/line3-st1.yaml", "--units", "5"])
        .args(["--defects", "rub=2"])
        .current_dir(root())
        .output()
        .unwrap();
    assert_exit(&out, 2);
    assert!(String::from_utf8_lossy(&out.stderr).contains("--defects: expected a fraction"));
}

#[test]
fn a_mix_places_exact_counts_deterministically() {
    let mix: DefectMix = "rub=0.1,seal-leak=0.05,dead-channel=0.013".parse().unwrap();
    // Largest remainder of (10, 5, 1.3, 83.7) units in 100: 10, 5, 1, and 84 good.
    assert_eq!(
        mix.counts(100),
        vec![
            (Defect::Rub, 10),
            (Defect::SealLeak, 5),
            (Defect::DeadChannel, 1)
        ]
    );
    let a = mix.assign(100, 2, 3);
    assert_eq!(a, mix.assign(100, 2, 3));
    assert_ne!(a, mix.assign(100, 2, 4));
    assert_eq!(a.iter().filter(|u| u.is_some()).count(), 16);
    assert!(a.iter().flatten().all(|(_, c)| *c < 2));
}
