//! Calibration science on the command line: `pairs`, `ota` and `export`, run as the real binary.
//!
//! Example files here are invented unless a check names an outside source; every check on them
//! is arithmetic from the definitions in the README.

use crate::support::Taucal;

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
    assert!(out.stderr.contains("pairs.csv:3:1"), "{}", out.stderr);
    assert!(out.stderr.contains("`five`"), "{}", out.stderr);
    let out = Taucal::new()
        .file("pairs.csv", "a,b,c\n1,2,3\n")
        .args(["pairs", "pairs.csv"])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("pairs.csv:1:1"), "{}", out.stderr);
    let out = Taucal::new().args(["pairs", "missing.csv"]).run();
    out.expect_code(2);
    assert!(out.stderr.contains("missing.csv"), "{}", out.stderr);
}
