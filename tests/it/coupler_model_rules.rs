//! Rules a coupler model file must obey beyond its schema.
use std::path::Path;
use tragus::models::coupler::{load_model_str, ModelError};

// A rigid wall behind series elements only admits no flow: the input impedance is
// infinite at every frequency (Kirchhoff: U = 0 through every series element into U = 0).
// Such a model is refused with the termination's position instead of evaluating to NaN.
#[test]
fn rigid_end_behind_series_elements_only_is_refused_at_the_termination() {
    let text = "coupler: series-only\n\
                elements:\n\
                \x20 - series: {resistance_pa_s_m3: 1.0e6, inertance_kg_m4: 100}\n\
                \x20 - tap: mic\n\
                termination: rigid\n";
    let err = load_model_str(text, Path::new("series-only.yaml")).unwrap_err();
    let ModelError::Invalid(problems) = err else {
        panic!("expected problems, got {err}");
    };
    assert_eq!(problems.len(), 1, "{problems:?}");
    let p = problems[0].to_string();
    assert!(
        p.starts_with(
            "series-only.yaml:5:14: termination: a rigid end behind series elements only"
        ),
        "{p}"
    );
}

// The same series element in front of a cavity, or into a radiating end, is a finite load
// and loads; its input impedance is then the series impedance plus the cavity's
// 1/(jωC), C = V/(ρc²) (Beranek & Mellow 2012, ch. 3).
#[test]
fn series_element_before_a_cavity_or_an_open_end_is_accepted() {
    let cavity = "coupler: series-cavity\n\
                  elements:\n\
                  \x20 - series: {resistance_pa_s_m3: 1.0e6}\n\
                  \x20 - cavity: {volume_mm3: 1000}\n\
                  \x20 - tap: mic\n\
                  termination: rigid\n";
    let m = load_model_str(cavity, Path::new("a.yaml")).expect("valid");
    let c = m.coupler();
    let f = 250.0;
    let w = 2.0 * std::f64::consts::PI * f;
    let rho_c2 = c.air.density_kg_m3 * c.air.speed_of_sound_m_s.powi(2);
    let z = c.evaluate(f).input_impedance;
    // Lumped: exact for the lumped cavity element; 1e-9 relative is round-off.
    assert!((z.re - 1.0e6).abs() < 1e-3, "{z}");
    assert!(
        (z.im + rho_c2 / (w * 1e-6)).abs() / (rho_c2 / (w * 1e-6)) < 1e-9,
        "{z}"
    );

    let open = "coupler: series-open\n\
                elements:\n\
                \x20 - series: {resistance_pa_s_m3: 1.0e6}\n\
                \x20 - tap: mic\n\
                termination: {open_baffled: {radius_mm: 1}}\n";
    let m = load_model_str(open, Path::new("b.yaml")).expect("valid");
    assert!(m.coupler().evaluate(f).input_impedance.re.is_finite());
}

// Every YAML file kind of the project refuses bytes that are not UTF-8 with the position
// of the first bad byte (line 2, column 6 here: after "ok: 1\n" and "bad: "), never with
// a bare I/O error or a panic (UTF-8, RFC 3629: 0xFF never occurs).
#[test]
fn files_that_are_not_utf8_are_refused_at_the_bad_byte() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("bad.yaml");
    std::fs::write(&path, b"ok: 1\nbad: \xff\xfe\n").unwrap();
    let want = format!(
        "{}:2:6: expected UTF-8 text, found invalid bytes",
        path.display()
    );
    let messages = [
        tragus::models::coupler::load_model(&path)
            .unwrap_err()
            .to_string(),
        tragus::models::earphone::load_earphone(&path)
            .unwrap_err()
            .to_string(),
        tragus::station::load_station(&path)
            .unwrap_err()
            .to_string(),
        tragus::calibration::load_calibration(&path)
            .unwrap_err()
            .to_string(),
    ];
    for m in messages {
        assert_eq!(m, want);
    }
}
