//! A script stage is bounded whatever its code does: its bench time (`time_limit_s`), its own
//! computing (`compute_limit_s`), its values' sizes and its log volume. Each bound stops the run
//! (exit 3, status `failed`, data kept) with an error at the script's line.

use crate::support::Taucal;

/// A recipe whose one stage runs `code` as a script, with `keys` added to the stage.
fn recipe(keys: &str, code: &str) -> String {
    format!(
        "[recipe]\nname = \"limits\"\n\n[[stage]]\nname = \"s\"\nkind = \"script\"\ncenter_mhz = 5180\nbw_mhz = 80\n{keys}\nscript = '''\n{code}\n'''\n"
    )
}

/// Runs the recipe; checks it was stopped as failed; returns stderr.
fn stopped(keys: &str, code: &str) -> String {
    let out = Taucal::new()
        .file("r.toml", &recipe(keys, code))
        .args(["run", "r.toml", "--out", "x"])
        .run();
    out.expect_code(3);
    let m: toml::Table = toml::from_str(&out.read("x/manifest.toml")).expect("manifest");
    assert_eq!(m["status"].as_str(), Some("failed"), "{m:?}");
    out.stderr
}

#[test]
fn a_growing_array_is_stopped_by_its_size_or_the_computing_limit() {
    // The runaway: pushes that grew for 400 s. Either bound may come first; both name
    // the line of the loop (the script starts on line 11 of r.toml).
    let err = stopped(
        "compute_limit_s = 5",
        "let a = [];\nloop {\n    a.push(1);\n}",
    );
    assert!(
        err.contains("r.toml line 13,") || err.contains("r.toml line 12,"),
        "{err}"
    );
    assert!(
        err.contains("grew past the sandbox's limit (arrays 65536 elements")
            || err.contains("compute_limit_s"),
        "{err}"
    );
}

#[test]
fn computing_past_compute_limit_s_is_stopped_at_its_line() {
    let err = stopped(
        "compute_limit_s = 0.5",
        "let n = 0;\nloop {\n    n += 1;\n}",
    );
    assert!(err.contains("compute_limit_s of 0.5 s"), "{err}");
    assert!(err.contains("r.toml line 1"), "{err}");
}

#[test]
fn waiting_past_time_limit_s_is_stopped_before_or_as_it_happens() {
    // Bench time is virtual here: an hour-long loop of waits ends in moments. A single wait that
    // would overrun is refused before it starts; many small ones are stopped once over.
    let err = stopped(
        "time_limit_s = 60",
        "set_atten(40.0);\nloop {\n    burst(16);\n    wait_ms(1000);\n}",
    );
    assert!(err.contains("time_limit_s of 60"), "{err}");
    let err = stopped("time_limit_s = 60", "wait_ms(59000);\nwait_ms(2000);");
    assert!(
        err.contains("wait_ms(2000) would take the stage past its time_limit_s"),
        "{err}"
    );
    assert!(err.contains("r.toml line 12,"), "{err}");
}

#[test]
fn logging_past_the_volume_limit_is_stopped_and_the_log_stays_small() {
    for call in ["log", "print"] {
        let out = Taucal::new()
            .file(
                "r.toml",
                &recipe(
                    "",
                    &format!("loop {{\n    {call}(\"0123456789abcdef0123456789abcdef\");\n}}"),
                ),
            )
            .args(["run", "r.toml", "--out", "x", "--quiet"])
            .run();
        out.expect_code(3);
        assert!(
            out.stderr.contains("logged more than 1024 KiB"),
            "{call}: {}",
            out.stderr
        );
        assert!(
            out.stderr.contains("r.toml line 1"),
            "{call}: {}",
            out.stderr
        );
        let log = std::fs::metadata(out.path("x/run.log"))
            .expect("run.log")
            .len();
        assert!(log < 8 << 20, "{call}: run.log is {log} bytes");
    }
}

#[test]
fn limits_that_are_not_positive_durations_are_refused() {
    for (keys, words) in [
        ("time_limit_s = 0", "stage.0.time_limit_s"),
        ("compute_limit_s = -1", "stage.0.compute_limit_s"),
        ("time_limit_s = 1e9", "more than"),
    ] {
        let out = Taucal::new()
            .file("r.toml", &recipe(keys, "log(\"hi\");"))
            .args(["check", "r.toml"])
            .run();
        out.expect_code(2);
        assert!(out.stderr.contains(words), "{keys}: {}", out.stderr);
        assert!(
            out.stderr.contains("r.toml line 9,"),
            "{keys}: {}",
            out.stderr
        );
    }
}
