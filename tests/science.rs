//! Calibration science on the command line: `pairs`, `ota` and `export`, run as the real binary.
//!
//! Example files here are invented unless a check names an outside source; every check on them
//! is arithmetic from the definitions in the README.

use crate::support::{contract_columns, skip_without, Taucal};

const TRIANGLE: &str = "unit_a,unit_b,sum_ps,se_ps\nA,B,5000,4\nB,C,5600,4\nA,C,5400,4\n";

#[test]
fn pairs_solves_a_triangle() {
    // Algebra from the definition: K_A = (m_AB + m_AC − m_BC)/2 = 2400 ps, and cyclically;
    // with equal errors σ = 4 ps each K has se σ·√3/2 = 3.464 ps.
    let out = Taucal::new()
        .file("pairs.csv", TRIANGLE)
        .args(["pairs", "pairs.csv"])
        .run();
    out.expect_code(0);
    assert_eq!(
        out.stdout,
        "unit,delay_ps,se_ps\nA,2400.000,3.464\nB,2600.000,3.464\nC,3000.000,3.464\n"
    );
}

#[test]
fn pairs_without_an_odd_cycle_exit_2_and_say_what_is_needed() {
    let square = "unit_a,unit_b,sum_ps,se_ps\nA,B,1,1\nB,C,1,1\nC,D,1,1\nD,A,1,1\n";
    let out = Taucal::new()
        .file("pairs.csv", square)
        .args(["pairs", "pairs.csv"])
        .run();
    out.expect_code(2);
    assert!(out.stdout.is_empty());
    assert!(
        out.stderr
            .contains("an odd cycle (e.g. three units measured pairwise) is needed"),
        "{}",
        out.stderr
    );
    let split = format!("{TRIANGLE}X,Y,5000,4\n");
    let out = Taucal::new()
        .file("pairs.csv", &split)
        .args(["pairs", "pairs.csv"])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("`X`, `Y`"), "{}", out.stderr);
}

#[test]
fn pairs_name_the_file_and_line_of_bad_input() {
    let bad = "unit_a,unit_b,sum_ps,se_ps\nA,B,5000,4\nB,C,five,4\n";
    let out = Taucal::new()
        .file("pairs.csv", bad)
        .args(["pairs", "pairs.csv"])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("pairs.csv line 3, column 1:"),
        "{}",
        out.stderr
    );
    assert!(out.stderr.contains("`five`"), "{}", out.stderr);
    let out = Taucal::new()
        .file("pairs.csv", "a,b,c\n1,2,3\n")
        .args(["pairs", "pairs.csv"])
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains("pairs.csv line 1, column 1:"),
        "{}",
        out.stderr
    );
    let out = Taucal::new().args(["pairs", "missing.csv"]).run();
    out.expect_code(2);
    assert!(out.stderr.contains("missing.csv"), "{}", out.stderr);
}

/// Invented log in the shape devices write: a status column, a quoted header, an RSSI column,
/// ranges in mm, true distances in m, failed and empty readings.
const RANGES: &str = "\"time\",status,range_mm,rssi_dbm,true_m\n\
                      0.1,ok,3400,-40,1\n\
                      0.2,ok,3500,-41,1\n\
                      0.3,fail,,-41,1\n\
                      0.4,ok,3600,-40,1\n\
                      0.5,ok,5600,-55,3\n\
                      0.6,ok,nan,-55,3\n\
                      0.7,ok,5400,-56,3\n\
                      0.8,ok,5500,-55,3\n\
                      0.9,ok,9000,-62,5\n\
                      1.0,ok,7500,-61,5\n\
                      1.1,ok,-,-61,5\n";

#[test]
fn ota_prints_the_offset_and_the_error_table() {
    // Arithmetic from the README's definitions: offset = median(3.4, 3.5, 3.6) − 1 = 2.5 m; at
    // 1 m the |errors| after are 0.1, 0, 0.1 (definition-7 p90 at h = 1.8: 0.1); at 5 m they are
    // 1.5 and 0 (median 0.75; p90 at h = 0.9: 0 + 0.9·1.5 = 1.35).
    let out = Taucal::new()
        .file("ranges.csv", RANGES)
        .args([
            "ota",
            "ranges.csv",
            "--measured",
            "range_mm",
            "--truth",
            "true_m",
            "--unit",
            "mm",
            "--at",
            "1",
        ])
        .run();
    out.expect_code(0);
    assert_eq!(
        out.stdout,
        "offset 2.5000 m\n\
         true_m,n,median_error_before_m,median_error_after_m,p90_abs_error_after_m\n\
         1.000,3,2.5000,0.0000,0.1000\n\
         3.000,3,2.5000,0.0000,0.1000\n\
         5.000,2,3.2500,0.7500,1.3500\n"
    );
    assert!(out.stderr.contains("3 skipped"), "{}", out.stderr);
    assert!(out.stderr.contains("look like m"), "{}", out.stderr);
}

#[test]
fn ota_refuses_unknown_columns_and_distances_with_status_2() {
    let ota = |extra: &[&str]| {
        Taucal::new()
            .file("ranges.csv", RANGES)
            .args(["ota", "ranges.csv", "--unit", "mm", "--truth-unit", "m"])
            .args(extra.iter().copied())
            .run()
    };
    let out = ota(&["--measured", "range", "--truth", "true_m", "--at", "1"]);
    out.expect_code(2);
    assert!(out.stderr.contains("range_mm, rssi_dbm"), "{}", out.stderr);
    let out = ota(&["--measured", "range_mm", "--truth", "true_m", "--at", "2"]);
    out.expect_code(2);
    assert!(out.stderr.contains("1, 3, 5"), "{}", out.stderr);
    let out = ota(&["--measured", "range_mm", "--truth", "true_m", "--at", "-1"]);
    out.expect_code(2);
}

/// A finished demo run in a temporary directory, its files under `run/`.
fn demo_run() -> crate::support::Outcome {
    let run = Taucal::new()
        .args([
            "run",
            &crate::support::repo("recipes/rx-gain-sweep.toml"),
            "--out",
            "run",
        ])
        .run();
    run.expect_code(0);
    run
}

/// `caltable.csv` rows as (center, bw, gain, delay_ps, ci95_ps, source).
fn caltable(text: &str) -> Vec<(u32, u32, u32, f64, f64, String)> {
    text.lines()
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            let num = |i: usize| f[i].parse::<f64>().expect("number");
            (
                num(0) as u32,
                num(1) as u32,
                num(2) as u32,
                num(3),
                num(4),
                f[7].to_string(),
            )
        })
        .collect()
}

fn gcc_available() -> bool {
    std::process::Command::new("gcc")
        .arg("--version")
        .output()
        .is_ok_and(|o| o.status.success())
}

#[test]
fn c_header_compiles_warning_free_and_holds_the_rounded_table() {
    let run = demo_run();
    let table = caltable(&run.read("run/caltable.csv"));
    let export = Taucal::in_dir(run.dir)
        .args(["export", "run", "--format", "c", "--out", "taucal_k.h"])
        .run();
    export.expect_code(0);
    let header = export.read("taucal_k.h");
    assert!(header.starts_with("/*"), "{header}");
    for needle in ["ps", "MHz", "run started", "sha256 "] {
        assert!(header.contains(needle), "opening comment lacks `{needle}`");
    }
    if !gcc_available() {
        skip_without(
            "gcc",
            "c_header_compiles_warning_free_and_holds_the_rounded_table",
        );
        return;
    }
    let dir = export.dir.path();
    let gcc = |args: &[&str]| {
        let out = std::process::Command::new("gcc")
            .args(["-std=c99", "-Wall", "-Wextra", "-Werror"])
            .args(args)
            .current_dir(dir)
            .output()
            .expect("run gcc");
        assert!(
            out.status.success(),
            "gcc {args:?}:\n{}",
            String::from_utf8_lossy(&out.stderr)
        );
    };
    gcc(&["-x", "c", "-c", "taucal_k.h", "-o", "header.o"]);
    std::fs::write(
        dir.join("print.c"),
        "#include <stdio.h>\n#include \"taucal_k.h\"\n\
         int main(void)\n{\n    size_t i;\n    for (i = 0; i < TAUCAL_K_COUNT; ++i) {\n\
         \x20       const struct taucal_k_entry *e = taucal_k_find(taucal_k_table[i].center_mhz,\n\
         \x20           taucal_k_table[i].bw_mhz, taucal_k_table[i].gain_index);\n\
         \x20       printf(\"%lu,%lu,%lu,%ld,%ld,%u\\n\", (unsigned long)e->center_mhz,\n\
         \x20           (unsigned long)e->bw_mhz, (unsigned long)e->gain_index, (long)e->delay_ps,\n\
         \x20           (long)e->ci95_ps, (unsigned)e->modelled);\n    }\n    return 0;\n}\n",
    )
    .expect("write print.c");
    gcc(&["print.c", "-o", "print"]);
    let printed = std::process::Command::new(dir.join("print"))
        .output()
        .expect("run the C program");
    let expected: String = table
        .iter()
        .map(|(c, b, g, d, ci, s)| {
            format!(
                "{c},{b},{g},{},{},{}\n",
                d.round(),
                ci.round(),
                u8::from(s == "modelled")
            )
        })
        .collect();
    assert_eq!(String::from_utf8_lossy(&printed.stdout), expected);
}

#[test]
fn json_and_toml_exports_round_trip_the_table() {
    let run = demo_run();
    let csv_text = run.read("run/caltable.csv");
    let table = caltable(&csv_text);
    let manifest = run.read("run/manifest.toml");
    let export = |format: &str, dir| {
        let out = Taucal::in_dir(dir)
            .args(["export", "run", "--format", format])
            .run();
        out.expect_code(0);
        out
    };
    let json = export("json", run.dir);
    let doc: taucal::export::Document = serde_json::from_str(&json.stdout).expect("JSON parses");
    let toml_out = export("toml", json.dir);
    let doc_toml: taucal::export::Document = toml::from_str(&toml_out.stdout).expect("TOML parses");
    assert_eq!(doc, doc_toml);
    assert!(manifest.contains(&doc.run.recipe_sha256));
    assert_eq!(doc.entries.len(), table.len());
    for (e, (c, b, g, d, ci, s)) in doc.entries.iter().zip(&table) {
        assert_eq!((e.center_mhz, e.bw_mhz, e.gain_index), (*c, *b, *g));
        assert_eq!((e.delay_ps, e.ci95_ps, &e.source), (*d, *ci, s));
    }
    // The export holds the design §4 columns; the budget stays with the run.
    let csv_out = export("csv", toml_out.dir);
    assert_eq!(csv_out.stdout, contract_columns(&csv_text));
}

#[test]
fn export_of_a_directory_without_a_run_exits_2() {
    let out = Taucal::new()
        .args(["export", "nowhere", "--format", "c"])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("caltable.csv"), "{}", out.stderr);
}
