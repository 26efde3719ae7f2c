//! Thévenin table: CSV loading (errors with path:line:col) and log-frequency interpolation.
use std::io::Write;
use tragus::acoustics::source::{parse_thevenin_csv, Source, SourceError};
use tragus::acoustics::C64;

const HEADER: &str = "hz,p_re,p_im,z_re,z_im\n";

fn err_text(body: &str) -> String {
    match parse_thevenin_csv(body, "src.csv") {
        Err(e) => e.to_string(),
        Ok(s) => panic!("expected an error, parsed {s:?}"),
    }
}

#[test]
fn reads_a_table_and_interpolates_linearly_in_log_frequency() {
    let text = format!("# invented demo table\n{HEADER}100,1,0,2e7,0\n\n400,3,-2,4e7,1e7\n");
    let src = parse_thevenin_csv(&text, "t.csv").unwrap();
    let Source::Thevenin { table } = &src else {
        panic!("not a thevenin source")
    };
    assert_eq!(table.len(), 2);
    // 200 Hz is halfway between 100 and 400 Hz in log-frequency (log2: 6.64, 7.64, 8.64),
    // so the interpolated value is the arithmetic mean of the end points (definition of
    // linear interpolation); exact up to rounding of ln() (1e-12 relative, f64 rounding).
    let t = src.thevenin(200.0).unwrap().unwrap();
    assert!((t.p_oc_pa_per_v - C64::new(2.0, -1.0)).norm() < 1e-12);
    assert!((t.z_s_pa_s_m3 - C64::new(3e7, 0.5e7)).norm() < 1e-12 * 3e7);
    // At a table point the value is the point itself (exact).
    assert_eq!(
        src.thevenin(400.0).unwrap().unwrap().p_oc_pa_per_v,
        C64::new(3.0, -2.0)
    );
    // Loaded by Z_L = Zs the outlet pressure is half the open-circuit pressure (Thévenin:
    // p_oc·Z_L/(Zs+Z_L) with Z_L = Zs); exact in f64 up to one rounding.
    let z = t.z_s_pa_s_m3;
    let p = src.pressure_at_load(200.0, z).unwrap();
    assert!((p - t.p_oc_pa_per_v * 0.5).norm() < 1e-14);
    // No extrapolation: outside the table is an error naming the range.
    let e = src.thevenin(50.0).unwrap_err();
    assert_eq!(
        e.to_string(),
        "frequency 50 hz is outside the source table (100..400 hz)"
    );
}

#[test]
fn the_ideal_volume_velocity_source_has_no_impedance() {
    // Zs = ∞ (docs/architecture.md): p = U·Z_L with U = 1 m³/s whatever the load.
    let s = Source::VolumeVelocity;
    assert_eq!(s.impedance(1e3).unwrap(), None);
    let z = C64::new(1e7, -3e7);
    assert_eq!(s.pressure_at_load(1e3, z).unwrap(), z);
    assert_eq!(s.volume_velocity_into(1e3, z).unwrap(), C64::new(1.0, 0.0));
}

#[test]
fn errors_name_the_line_and_column() {
    assert_eq!(
        err_text("hz,p_re,p_im,z_re\n1,2,3,4\n"),
        "src.csv:1:1: expected the header \"hz,p_re,p_im,z_re,z_im\", found \"hz,p_re,p_im,z_re\""
    );
    assert_eq!(
        err_text(&format!("{HEADER}100,1,0,2e7,0\n200,1, x ,2e7,0\n")),
        "src.csv:3:8: expected a finite number for p_im, found \"x\""
    );
    assert_eq!(
        err_text(&format!("{HEADER}100,1,0,2e7\n")),
        "src.csv:2:12: expected 5 fields (hz,p_re,p_im,z_re,z_im), found 4"
    );
    assert_eq!(
        err_text(&format!("{HEADER}100,1,0,2e7,0,9\n")),
        "src.csv:2:15: expected 5 fields (hz,p_re,p_im,z_re,z_im), found 6"
    );
    assert_eq!(
        err_text(&format!("{HEADER}100,1,0,2e7,0\n100,1,0,2e7,0\n")),
        "src.csv:3:1: expected a frequency above the previous row's 100 hz, found 100"
    );
    assert_eq!(
        err_text(&format!("{HEADER}  -5,1,0,2e7,0\n")),
        "src.csv:2:3: expected a positive frequency, found -5"
    );
    assert_eq!(
        err_text(&format!("{HEADER}100,inf,0,2e7,0\n")),
        "src.csv:2:5: expected a finite number for p_re, found \"inf\""
    );
    assert_eq!(
        err_text(HEADER),
        "src.csv:2:1: expected at least one data row, found none"
    );
    assert_eq!(
        err_text(""),
        "src.csv:1:1: expected the header \"hz,p_re,p_im,z_re,z_im\", found an empty file"
    );
}

#[test]
fn reads_from_a_file_and_reports_a_missing_one() {
    let mut f = tempfile::NamedTempFile::new().unwrap();
    write!(f, "{HEADER}20,0.5,0,1e7,0\n20000,0.5,0,1e7,0\n").unwrap();
    let src = Source::thevenin_from_csv(f.path()).unwrap();
    assert_eq!(src.impedance(1e3).unwrap(), Some(C64::new(1e7, 0.0)));
    let missing = f.path().with_extension("absent");
    let e = Source::thevenin_from_csv(&missing).unwrap_err();
    assert!(matches!(e, SourceError::Io { .. }));
    assert!(e.to_string().starts_with(&format!(
        "{}: cannot read the source table: ",
        missing.display()
    )));
}
