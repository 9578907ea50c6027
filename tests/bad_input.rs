//! A battery of bad inputs: each ends with exit status 2, a message that names the file, line
//! and column where there is one, no panic, and no run directory.

use crate::support::{repo, Outcome, Taucal};

const GOOD: &str = r#"[recipe]
name = "probe"

[vars]
bursts = 2

[[stage]]
name = "sweep"
kind = "sweep"
center_mhz = 5180
bw_mhz = 80
atten_db = [40.0, 50.0]
bursts = "$bursts"
frames = 8
"#;

/// Runs `taucal check` and `taucal run` on `recipe` and checks both refuse it the same way.
fn refused(recipe: &str, extra: &[&str], location: &str, words: &str) {
    for cmd in ["check", "run"] {
        let mut args = vec![cmd.to_string(), "r.toml".to_string()];
        args.extend(extra.iter().map(|s| s.to_string()));
        let out = Taucal::new()
            .file("r.toml", recipe)
            .file("bad.rhai", "let x = ;\n")
            .args(args)
            .run();
        out.expect_code(2);
        // A place in a file opens the message's first line.
        let wanted = if location.contains(" line ") {
            format!("taucal: {location}")
        } else {
            location.to_string()
        };
        assert!(
            out.stderr.contains(&wanted),
            "{cmd}: wanted {wanted:?} in\n{}",
            out.stderr
        );
        assert!(
            out.stderr.contains(words),
            "{cmd}: wanted {words:?} in\n{}",
            out.stderr
        );
        assert!(!out.has_dir("runs"), "{cmd}: a run directory was created");
    }
}

fn edit(from: &str, to: &str) -> String {
    assert!(GOOD.contains(from), "{from}");
    GOOD.replacen(from, to, 1)
}

#[test]
fn the_good_recipe_is_accepted() {
    Taucal::new()
        .file("r.toml", GOOD)
        .args(["check", "r.toml"])
        .run()
        .expect_code(0);
}

#[test]
fn toml_syntax_error() {
    refused(
        &edit("name = \"probe\"", "name = \"probe"),
        &[],
        "r.toml line 2, column ",
        "string",
    );
}

#[test]
fn unknown_table() {
    refused(
        &edit("[vars]", "[varz]"),
        &[],
        "r.toml line 4, column ",
        "unknown field",
    );
}

#[test]
fn unknown_stage_key_lists_the_allowed_ones() {
    refused(
        &edit("frames = 8", "frames = 8\nburts = 3"),
        &[],
        "r.toml line 15, column ",
        "atten_db",
    );
    refused(
        &edit("frames = 8", "frames = 8\nburts = 3"),
        &[],
        "r.toml line 15, column ",
        "did you mean `bursts`?",
    );
    refused(
        &edit("frames = 8", "frames = 8\nzzzzzz = 3"),
        &[],
        "r.toml line 15, column ",
        "what would be right: the keys allowed here are",
    );
}

#[test]
fn unknown_stage_kind() {
    refused(
        &edit("kind = \"sweep\"", "kind = \"sweeep\""),
        &[],
        "r.toml line 9, column 8:",
        "not a stage kind",
    );
}

#[test]
fn missing_frames() {
    refused(
        &edit("frames = 8\n", ""),
        &[],
        "r.toml line 7, column 1:",
        "needs `frames`",
    );
}

#[test]
fn receiver_protection_refuses_a_level_above_max_input() {
    refused(
        &edit("[40.0, 50.0]", "[10.0, 50.0]"),
        &[],
        "r.toml line 12, column 12:",
        "above its max_input_dbm",
    );
}

#[test]
fn receiver_protection_holds_at_the_exact_limit() {
    // The demo bench: the reference's 15 dBm less 8 dB of fixed loss may put at most −10 dBm
    // into the DUT, so 17 dB is the least attenuation allowed (README, "Bench files").
    refused(
        &edit("[40.0, 50.0]", "[16.75]"),
        &[],
        "r.toml line 12, column 12",
        "16.75 dB puts -9.75 dBm into the DUT",
    );
    Taucal::new()
        .file("r.toml", &edit("[40.0, 50.0]", "[17.0]"))
        .args(["check", "r.toml"])
        .run()
        .expect_code(0);
}

#[test]
fn receiver_protection_checks_every_point_of_a_list() {
    refused(
        &edit("[40.0, 50.0]", "[40.0, 45.0, 16.75, 50.0, 60.0]"),
        &[],
        "r.toml line 12, column 12",
        "16.75 dB puts",
    );
}

/// The demo bench with the DUT transmitting `dut_tx` dBm and the reference `ref_tx` dBm and
/// taking at most `ref_max` dBm; `check` of a one-point recipe at `atten_db` on it.
fn checked_on_asymmetric_bench(dut_tx: f64, ref_tx: f64, ref_max: f64, atten_db: f64) -> Outcome {
    let bench = std::fs::read_to_string(repo("recipes/benches/sim-demo.toml")).expect("demo");
    let bench = bench
        .replacen(
            "[dut]\ntx_power_dbm = 15.0",
            &format!("[dut]\ntx_power_dbm = {dut_tx:.1}"),
            1,
        )
        .replacen(
            "tx_power_dbm = 15.0\nmax_input_dbm = -10.0\nmin_input_dbm = -82.0\n\n[sim]",
            &format!(
                "tx_power_dbm = {ref_tx:.1}\nmax_input_dbm = {ref_max:.1}\nmin_input_dbm = -82.0\n\n[sim]"
            ),
            1,
        );
    assert!(bench.contains(&format!(
        "max_input_dbm = {ref_max:.1}\nmin_input_dbm = -82.0\n\n[sim]"
    )));
    Taucal::new()
        .file("r.toml", &edit("[40.0, 50.0]", &format!("[{atten_db:.2}]")))
        .file("b.toml", &bench)
        .args(["check", "r.toml", "--bench", "b.toml"])
        .run()
}

#[test]
fn receiver_protection_on_an_asymmetric_bench_uses_the_other_units_power() {
    // Each receiver takes the other unit's transmit power (README, "Bench files"), less 8 dB of
    // fixed loss and the attenuation A; the DUT takes at most −10 dBm.
    // 1. The DUT transmits 20 dBm, the reference 5 dBm and takes at most −25 dBm: into the DUT
    //    5 − 8 − A ≤ −10 needs A ≥ 7, into the reference 20 − 8 − A ≤ −25 needs A ≥ 37.
    let out = checked_on_asymmetric_bench(20.0, 5.0, -25.0, 36.75);
    out.expect_code(2);
    assert!(
        out.stderr
            .contains("36.75 dB puts -24.75 dBm into the reference unit"),
        "{}",
        out.stderr
    );
    checked_on_asymmetric_bench(20.0, 5.0, -25.0, 37.0).expect_code(0);
    // 2. The reference transmits 20 dBm, the DUT 5 dBm, both take at most −10 dBm: into the DUT
    //    20 − 8 − A ≤ −10 needs A ≥ 22, into the reference 5 − 8 − A ≤ −10 needs A ≥ 7.
    let out = checked_on_asymmetric_bench(5.0, 20.0, -10.0, 21.75);
    out.expect_code(2);
    assert!(
        out.stderr.contains("21.75 dB puts -9.75 dBm into the DUT"),
        "{}",
        out.stderr
    );
    checked_on_asymmetric_bench(5.0, 20.0, -10.0, 22.0).expect_code(0);
}

#[test]
fn non_finite_numbers_in_a_bench_are_refused_where_they_stand() {
    for (from, to) in [
        ("max_input_dbm = -10.0", "max_input_dbm = nan"),
        ("min_input_dbm = -82.0", "min_input_dbm = -inf"),
        ("tx_power_dbm = 15.0", "tx_power_dbm = nan"),
        ("fixed_loss_db = 8.0", "fixed_loss_db = inf"),
    ] {
        let bench = std::fs::read_to_string(repo("recipes/benches/sim-demo.toml")).expect("demo");
        let at = bench.find(from).expect(from);
        let line = bench[..at].matches('\n').count() + 1;
        bench_refused(
            from,
            to,
            &format!("b.toml line {line}, column"),
            "not a finite number",
        );
    }
}

#[test]
fn a_power_level_no_bench_can_have_is_refused() {
    bench_refused(
        "max_input_dbm = -10.0",
        "max_input_dbm = 1e6",
        "`dut.max_input_dbm`",
        "not a power level",
    );
}

#[test]
fn non_finite_numbers_in_a_recipe_are_refused() {
    refused(
        &edit("[40.0, 50.0]", "[40.0, nan]"),
        &[],
        "r.toml line 12, column 19",
        "not a finite number",
    );
    refused(
        &edit("bursts = 2", "bursts = 2\nlevel = inf"),
        &[],
        "r.toml line 6, column 9",
        "not a finite number",
    );
}

#[test]
fn attenuation_off_the_grid() {
    refused(
        &edit("[40.0, 50.0]", "[40.1]"),
        &[],
        "r.toml line 12, column 12:",
        "grid",
    );
}

#[test]
fn attenuation_outside_the_range() {
    refused(
        &edit("[40.0, 50.0]", "[120.0]"),
        &[],
        "r.toml line 12, column 12:",
        "outside the attenuator's range",
    );
}

#[test]
fn bandwidth_that_is_no_channel_width() {
    refused(
        &edit("bw_mhz = 80", "bw_mhz = 30"),
        &[],
        "r.toml line 11, column 10:",
        "not a channel width",
    );
}

#[test]
fn center_outside_the_wifi_bands() {
    refused(
        &edit("center_mhz = 5180", "center_mhz = 1000"),
        &[],
        "r.toml line 10, column 14:",
        "not a Wi-Fi channel center",
    );
}

#[test]
fn misspelt_variable_reference() {
    refused(
        &edit("\"$bursts\"", "\"$burst\""),
        &[],
        "r.toml line 13, column 10:",
        "did you mean `$bursts`",
    );
}

#[test]
fn zero_bursts() {
    refused(
        &edit("bursts = 2", "bursts = 0"),
        &[],
        "r.toml line 13, column 10:",
        "whole number from 1",
    );
}

#[test]
fn fractional_frames() {
    refused(
        &edit("frames = 8", "frames = 2.5"),
        &[],
        "r.toml line 14, column 10:",
        "whole number",
    );
}

#[test]
fn duplicate_stage_names() {
    let text = format!("{GOOD}\n[[stage]]\nname = \"sweep\"\nkind = \"sweep\"\ncenter_mhz = 5180\nbw_mhz = 80\natten_db = [40.0]\nframes = 8\n");
    refused(&text, &[], "r.toml line 17, column 8:", "earlier stage");
}

#[test]
fn script_syntax_error_points_into_the_recipe() {
    let text = format!(
        "{GOOD}\n[[stage]]\nname = \"s\"\nkind = \"script\"\ncenter_mhz = 5180\nbw_mhz = 80\nscript = '''\nset_atten(40.0);\nlet x = ;\n'''\n"
    );
    refused(&text, &[], "r.toml line 23, column 9:", "script syntax");
}

#[test]
fn script_syntax_error_in_a_script_file() {
    let text = format!("{GOOD}\n[[stage]]\nname = \"s\"\nkind = \"script\"\ncenter_mhz = 5180\nbw_mhz = 80\nfile = \"bad.rhai\"\n");
    refused(&text, &[], "bad.rhai line 1, column 9:", "script syntax");
}

#[test]
fn missing_script_file() {
    let text = format!("{GOOD}\n[[stage]]\nname = \"s\"\nkind = \"script\"\ncenter_mhz = 5180\nbw_mhz = 80\nfile = \"nowhere.rhai\"\n");
    refused(&text, &[], "r.toml line 21, column 8:", "cannot read");
}

#[test]
fn sweep_key_in_a_script_stage() {
    let text = format!(
        "{GOOD}\n[[stage]]\nname = \"s\"\nkind = \"script\"\ncenter_mhz = 5180\nbw_mhz = 80\nframes = 4\nscript = 'burst(4);'\n"
    );
    refused(
        &text,
        &[],
        "r.toml line 21, column 10:",
        "does not belong in a script stage",
    );
}

#[test]
fn descending_range() {
    refused(
        &edit("[40.0, 50.0]", "{ from = 60.0, to = 40.0, step = 2.0 }"),
        &[],
        "r.toml line 12, column 12:",
        "ascending",
    );
}

#[test]
fn step_off_the_attenuator_grid() {
    refused(
        &edit("[40.0, 50.0]", "{ from = 40.0, to = 50.0, step = 0.3 }"),
        &[],
        "r.toml line 12, column ",
        "multiple of the attenuator's 0.25 dB step",
    );
}

#[test]
fn a_recipe_without_stages() {
    refused(
        "[recipe]\nname = \"empty\"\n",
        &[],
        "r.toml line 1, column 1:",
        "no stages",
    );
}

#[test]
fn reject_threshold_too_small() {
    refused(
        &format!("{GOOD}\n[fit]\nreject_mad = 1.0\n"),
        &[],
        "r.toml line 17, column 14:",
        "reject much of a clean",
    );
}

#[test]
fn set_of_an_undeclared_variable() {
    refused(
        GOOD,
        &["--set", "burst=3"],
        "burst",
        "did you mean `bursts`",
    );
}

#[test]
fn set_of_the_wrong_type() {
    refused(
        GOOD,
        &["--set", "bursts=many"],
        "bursts=many",
        "not a valid integer",
    );
}

fn bench_refused(edit_from: &str, edit_to: &str, location: &str, words: &str) {
    let bench = std::fs::read_to_string(repo("recipes/benches/sim-demo.toml")).expect("demo bench");
    assert!(bench.contains(edit_from), "{edit_from}");
    let bench = bench.replacen(edit_from, edit_to, 1);
    refused_with_bench(&bench, location, words);
}

fn refused_with_bench(bench: &str, location: &str, words: &str) {
    let out = Taucal::new()
        .file("r.toml", GOOD)
        .file("b.toml", bench)
        .args(["check", "r.toml", "--bench", "b.toml"])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains(location),
        "wanted {location:?} in\n{}",
        out.stderr
    );
    assert!(
        out.stderr.contains(words),
        "wanted {words:?} in\n{}",
        out.stderr
    );
}

#[test]
fn bench_with_a_timeout_on_a_simulated_role() {
    bench_refused(
        "dut = { driver = \"sim-ranging\", address = \"sim:\" }",
        "dut = { driver = \"sim-ranging\", address = \"sim:\", timeout_ms = 100.0 }",
        "b.toml line 13, column ",
        "`roles.dut.timeout_ms` applies to an instrument reached over a link",
    );
}

#[test]
fn bench_with_an_unknown_role() {
    bench_refused(
        "reference = { driver",
        "referense = { driver",
        "taucal: b.toml line ",
        "has no `reference` role",
    );
}

#[test]
fn bench_thresholds_not_descending() {
    bench_refused(
        "[-30.0, -55.0]",
        "[-55.0, -30.0]",
        "taucal: b.toml line ",
        "strictly descending",
    );
}

#[test]
fn bench_delay_table_and_thresholds_disagree() {
    bench_refused(
        "[900.0, 1150.0, 1400.0]",
        "[900.0, 1150.0]",
        "taucal: b.toml line ",
        "thresholds for 2 gain states",
    );
}

#[test]
fn bench_input_window_upside_down() {
    bench_refused(
        "min_input_dbm = -82.0",
        "min_input_dbm = 0.0",
        "taucal: b.toml line ",
        "not below max_input_dbm",
    );
}

#[test]
fn bench_value_of_the_wrong_type() {
    bench_refused(
        "cable_delay_ps = 6100.0",
        "cable_delay_ps = \"long\"",
        "taucal: b.toml line ",
        "invalid type",
    );
}

#[test]
fn missing_recipe_file() {
    let out = Taucal::new().args(["check", "nowhere.toml"]).run();
    out.expect_code(2);
    assert!(out.stderr.contains("cannot read recipe"), "{}", out.stderr);
}

#[test]
fn unknown_command_line_option() {
    let out = Taucal::new().args(["run", "r.toml", "--sed", "3"]).run();
    out.expect_code(2);
}

#[test]
fn fit_of_a_malformed_exchanges_file_names_the_line() {
    let header = "stage,point,burst,seq,atten_db,center_mhz,bw_mhz,t1_ps,t2_ps,t3_ps,t4_ps,dut_gain,dut_rssi_dbm,ref_gain,temp_c,status";
    let text = format!("{header}\nsweep,0,0,0,40,5180,80,1,2,3,4,0,-40,0,,ok\nsweep,0,0,1,40,5180,80,1,2,three,4,0,-40,0,,ok\n");
    let out = Taucal::new()
        .file("e.csv", &text)
        .args(["fit", "e.csv"])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("e.csv:3: column 10"), "{}", out.stderr);
}

#[test]
fn fit_of_a_file_without_the_contract_columns() {
    let out = Taucal::new()
        .file("e.csv", "a,b\n1,2\n")
        .args(["fit", "e.csv"])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("has no `stage` column"),
        "{}",
        out.stderr
    );
}

#[cfg(unix)]
#[test]
fn endless_files_are_refused_by_their_bound() {
    // `/dev/zero` as recipe, bench, script file and exchanges file: each read stops at its
    // bound (1 MiB for text files, one 4096-byte line for exchanges) with an error.
    let script = format!("{GOOD}\n[[stage]]\nname = \"s\"\nkind = \"script\"\ncenter_mhz = 5180\nbw_mhz = 80\nfile = \"/dev/zero\"\n");
    refused(
        &script,
        &[],
        "r.toml line 21, column 8",
        "larger than 1 MiB",
    );
    refused(
        GOOD,
        &["--bench", "/dev/zero"],
        "/dev/zero",
        "larger than 1 MiB",
    );
    let recipe = Taucal::new().args(["check", "/dev/zero"]).run();
    recipe.expect_code(2);
    assert!(
        recipe.stderr.contains("larger than 1 MiB"),
        "{}",
        recipe.stderr
    );
    let fit = Taucal::new().args(["fit", "/dev/zero"]).run();
    fit.expect_code(2);
    assert!(
        fit.stderr
            .contains("/dev/zero:1: the line is longer than 4096 bytes"),
        "{}",
        fit.stderr
    );
}

#[test]
fn reject_mad_not_finite_or_too_small() {
    let nan = format!("{GOOD}\n[fit]\nreject_mad = nan\n");
    refused(
        &nan,
        &[],
        "r.toml line 17, column 14",
        "is `nan`, not a finite number",
    );
    let inf = format!("{GOOD}\n[fit]\nreject_mad = inf\n");
    refused(
        &inf,
        &[],
        "r.toml line 17, column 14",
        "is `inf`, not a finite number",
    );
    let small = format!("{GOOD}\n[fit]\nreject_mad = 1.5\n");
    refused(&small, &[], "r.toml line 17, column 14", "use 2.0 or more");
    let two = format!("{GOOD}\n[fit]\nreject_mad = 2.0\n");
    Taucal::new()
        .file("r.toml", &two)
        .args(["check", "r.toml"])
        .run()
        .expect_code(0);
}
