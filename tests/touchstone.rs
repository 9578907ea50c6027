//! Group delay from a Touchstone file against scikit-rf (a general-purpose RF library from
//! PyPI, nobody here wrote it) computing it from the same file: a dispersive line with an echo,
//! written in each of the format's number forms and frequency units.

use std::f64::consts::PI;
use std::process::Command;
use taucal::touchstone::{parse, point_delays_s};

/// The Python that has scikit-rf: `TAUCAL_TEST_PYTHON` (`.ci/run` makes a virtual environment
/// and sets it), else `python3`; `None`, said, where it is missing (CI requires it).
fn python_with_skrf() -> Option<String> {
    use std::io::Write;
    let python = std::env::var("TAUCAL_TEST_PYTHON").unwrap_or_else(|_| "python3".into());
    let ok = Command::new(&python)
        .args(["-c", "import skrf"])
        .output()
        .is_ok_and(|o| o.status.success());
    if ok {
        return Some(python);
    }
    assert!(
        std::env::var_os("CI").is_none(),
        "scikit-rf is missing for {python}; .ci/run installs it and sets TAUCAL_TEST_PYTHON"
    );
    let _ = writeln!(
        std::io::stderr(),
        "SKIPPED touchstone vs scikit-rf: {python} has no scikit-rf (pip install scikit-rf)"
    );
    None
}

/// A two-port line of delay `tau_s` with a 4 % echo 6 ns late and a little loss rising with
/// frequency, S11 = S22 = a small reflection, written as Touchstone 1.1 text in `form`
/// (RI, MA or DB) and `unit`.
fn s2p(form: &str, unit: &str, tau_s: f64) -> String {
    let scale = match unit {
        "Hz" => 1.0,
        "kHz" => 1e3,
        "MHz" => 1e6,
        _ => 1e9,
    };
    let mut text =
        format!("! a cable with a mismatch, for the group-delay check\n# {unit} S {form} R 50\n");
    for k in 0..=400 {
        let f = 4.9e9 + 2.5e6 * f64::from(k);
        let w = 2.0 * PI * f;
        let loss = 10f64.powf(-(0.3 + 0.05 * f / 1e9) / 20.0);
        let (re, im) = (
            loss * ((-w * tau_s).cos() + 0.04 * (-w * (tau_s + 6e-9)).cos()),
            loss * ((-w * tau_s).sin() + 0.04 * (-w * (tau_s + 6e-9)).sin()),
        );
        let refl = (0.05, -0.02);
        let pair = |re: f64, im: f64| match form {
            "RI" => format!("{re:.12e} {im:.12e}"),
            "MA" => format!("{:.12e} {:.12e}", re.hypot(im), im.atan2(re).to_degrees()),
            _ => format!(
                "{:.12e} {:.12e}",
                20.0 * re.hypot(im).log10(),
                im.atan2(re).to_degrees()
            ),
        };
        text.push_str(&format!(
            "{:.12e} {} {} {} {}\n",
            f / scale,
            pair(refl.0, refl.1),
            pair(re, im),
            pair(re, im),
            pair(refl.0, refl.1)
        ));
    }
    text
}

#[test]
fn group_delay_equals_scikit_rf_on_the_same_file_in_every_form_and_unit() {
    let Some(python) = python_with_skrf() else {
        return;
    };
    let dir = tempfile::tempdir().expect("tempdir");
    let tau = 1.5 / (0.69 * 299_792_458.0);
    for (form, unit) in [("RI", "GHz"), ("MA", "MHz"), ("DB", "Hz"), ("MA", "kHz")] {
        let text = s2p(form, unit, tau);
        let path = dir.path().join(format!("line-{form}-{unit}.s2p"));
        std::fs::write(&path, &text).expect("write");
        let net = parse(&text, Some(2)).expect("parses");
        let ours = point_delays_s(&net.freq_hz, &net.sij(2, 1));
        // scikit-rf's Network.group_delay: −d(unwrapped phase)/dω by numpy.gradient.
        let script = "import sys, skrf\nn = skrf.Network(sys.argv[1])\nfor v in n.s21.group_delay.flatten():\n    print(repr(float(v)))\n";
        let out = Command::new(&python)
            .args(["-c", script, path.to_str().expect("utf-8 path")])
            .output()
            .expect("run python");
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let theirs: Vec<f64> = String::from_utf8_lossy(&out.stdout)
            .lines()
            .map(|l| l.trim().parse().expect("a number"))
            .collect();
        assert_eq!(theirs.len(), ours.len(), "{form} {unit}");
        let worst = ours
            .iter()
            .zip(&theirs)
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        assert!(
            worst < 1e-15,
            "{form} {unit}: worst difference {:.3e} ps",
            worst * 1e12
        );
    }
}
