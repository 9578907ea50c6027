//! Group delay from a Touchstone file against scikit-rf (a general-purpose RF library from
//! PyPI, nobody here wrote it) computing it from the same file: a dispersive line with an echo,
//! written in each of the format's number forms and frequency units.

use crate::support::python::python_with;
use std::f64::consts::PI;
use std::process::Command;
use taucal::touchstone::{parse, point_delays_s};

/// The Python with scikit-rf (`None`, said, where it is missing; CI requires it).
fn python_with_skrf() -> Option<String> {
    python_with(&["skrf"], "touchstone vs scikit-rf", "scikit-rf")
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

#[test]
fn path_delay_prints_an_ideal_lines_delay_per_channel_and_refuses_what_it_cannot_use() {
    use crate::support::Taucal;
    // 1.2 m of cable, velocity factor 0.70: 1.2 / (0.70 · 299 792 458 m/s) = 5718.2 ps.
    let tau = 1.2 / (0.70 * 299_792_458.0);
    let out = Taucal::new()
        .file("line.s2p", &ideal_line(tau))
        .args([
            "path-delay",
            "line.s2p",
            "--channel",
            "5180/80",
            "--channel",
            "5500/160",
        ])
        .run();
    out.expect_code(0);
    let lines: Vec<&str> = out.stdout.lines().collect();
    assert_eq!(
        lines[0],
        "center_mhz,bw_mhz,s21_delay_ps,s12_delay_ps,ripple_u_ps,points"
    );
    for (line, channel) in lines[1..].iter().zip(["5180,80,", "5500,160,"]) {
        assert!(line.starts_with(channel), "{line}");
        let f: Vec<f64> = line
            .split(',')
            .map(|v| v.parse().expect("number"))
            .collect();
        assert!(
            (f[2] - 5718.2).abs() < 0.05 && (f[3] - 5718.2).abs() < 0.05,
            "{line}"
        );
        assert!(f[4] < 0.001, "an ideal line has no ripple: {line}");
    }
    for (args, says) in [
        (vec!["--channel", "4000/80"], "not inside the file's"),
        (vec!["--channel", "5180"], "is not CENTER_MHZ/BW_MHZ"),
    ] {
        let mut all = vec!["path-delay", "line.s2p"];
        all.extend(args);
        let out = Taucal::new()
            .file("line.s2p", &ideal_line(tau))
            .args(all)
            .run();
        out.expect_code(2);
        assert!(out.stderr.contains(says), "{}", out.stderr);
    }
    let out = Taucal::new()
        .file(
            "bad.s2p",
            "# GHz S RI R 50\n5.0 0 0 1 0 1 0 0 0\n5.1 0 0 1 oops 1 0 0 0\n",
        )
        .args(["path-delay", "bad.s2p", "--channel", "5050/20"])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("bad.s2p")
            && out.stderr.contains("line 3")
            && out.stderr.contains("`oops`"),
        "{}",
        out.stderr
    );
}

/// A matched lossless line of delay `tau_s`, 4.9 to 5.9 GHz in 5 MHz steps, Touchstone 1.1 RI.
fn ideal_line(tau_s: f64) -> String {
    let mut text = String::from("# Hz S RI R 50\n");
    for k in 0..=200 {
        let f = 4.9e9 + 5e6 * f64::from(k);
        let w = 2.0 * PI * f;
        let (re, im) = ((-w * tau_s).cos(), (-w * tau_s).sin());
        text.push_str(&format!(
            "{f} 0 0 {re:.15e} {im:.15e} {re:.15e} {im:.15e} 0 0\n"
        ));
    }
    text
}
