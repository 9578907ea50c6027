//! The uncertainty budget against the simulator's truth: on a bench unlike the demo's, whose
//! true cable delay and reference K differ from the declared ones by draws of their stated
//! standard uncertainties, the expanded interval (k·u_c) must cover the true K about 95 % of
//! the time, where the statistical interval alone does not. And the bench file's forms.

use crate::support::bench::{shipped_with, TestBench};
use crate::support::sweep::Sweep;
use crate::support::{repo, Taucal};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use taucal::bench::uncertainty::{InputUncertainty, UncertaintyFrom};
use taucal::bench::{BenchUncertainty, PathFacts, PerGain};
use taucal::data::Exchange;
use taucal::fit::budget_cell::cell_budget;
use taucal::fit::{Deembed, FitOptions, Fitter};
use taucal::sim::SimTruth;

/// Declared one-way cable delay and its standard uncertainty.
const CABLE_PS: f64 = 7_300.0;
const CABLE_U_PS: f64 = 30.0;
/// Declared reference K and its standard uncertainty.
const REF_K_PS: f64 = 2_650.0;
const REF_U_PS: f64 = 20.0;

/// The base test bench (40 MHz here, two DUT gain states, −14 ppm, 350 ps jitter) with its
/// reference's true K `ref_k_ps`. No late locks: their one-sided bias is another matter than
/// the bench's stated uncertainties.
fn truth(ref_k_ps: f64) -> SimTruth {
    TestBench::base()
        .sim_reference(&format!("delay_ps = {ref_k_ps}"))
        .truth()
}

/// Exchanges of a 20..86 dB sweep in 6 dB steps, two bursts of 12 per point, on the true path.
fn simulate(truth: &SimTruth, path: &PathFacts, seed: u64) -> Vec<Exchange> {
    let sweep = Sweep {
        stage: "sweep",
        center_mhz: 5500,
        bw_mhz: 40,
        frames: 12,
        bursts: 2,
        gap_ps: 100_000_000_000,
    };
    sweep.run(truth, path, seed, (20..=86).step_by(6).map(f64::from))
}

fn stated(u_ps: f64) -> Option<InputUncertainty> {
    Some(InputUncertainty {
        u_ps,
        dof: f64::INFINITY,
        from: UncertaintyFrom::Standard,
    })
}

#[test]
fn the_expanded_interval_covers_the_truth_when_the_bench_is_off_by_its_stated_u() {
    let declared = BenchUncertainty {
        cable: stated(CABLE_U_PS),
        atten: None,
        reference: stated(REF_U_PS),
        measured: None,
    };
    let deembed = Deembed {
        cable_delay_ps: CABLE_PS,
        atten_delay_ps_per_db: 0.0,
        reference_delay: PerGain::Same(REF_K_PS),
        applied_k_ps: None,
        measured: None,
    };
    let (mut expanded_in, mut statistical_in, mut total) = (0u32, 0u32, 0u32);
    let mut u_stat_sum = 0.0;
    for seed in 0..800u64 {
        // The bench as it really is: its path and reference drawn around the declared values.
        let mut rng = ChaCha8Rng::seed_from_u64(7_000 + seed);
        let z_cable: f64 = StandardNormal.sample(&mut rng);
        let z_ref: f64 = StandardNormal.sample(&mut rng);
        let path = PathFacts {
            cable_delay_ps: CABLE_PS + CABLE_U_PS * z_cable,
            fixed_loss_db: 9.0,
            atten_delay_ps_per_db: 0.0,
        };
        let truth = truth(REF_K_PS + REF_U_PS * z_ref);
        let rows = simulate(&truth, &path, 500 + seed);
        let mut fitter = Fitter::new(deembed.clone(), FitOptions::default());
        for r in &rows {
            fitter.push(r);
        }
        // One cell a seed: the cells of a seed share its bench draw, so they are not
        // independent trials. The gain index alternates so both states are tried.
        let result = fitter.finish();
        let gain = (seed % 2) as u32;
        let row = result
            .rows
            .iter()
            .find(|r| r.gain_index == gain)
            .expect("both gain states measured");
        let k = truth.dut_k_ps(gain).expect("true K");
        let budget = cell_budget(row, &declared).row_budget().expect("combines");
        total += 1;
        expanded_in += u32::from((row.delay_ps - k).abs() <= budget.expanded_ps);
        statistical_in += u32::from((row.delay_ps - k).abs() <= row.ci95_ps);
        u_stat_sum += budget.u_stat_ps;
    }
    let share = f64::from(expanded_in) / f64::from(total);
    let statistical = f64::from(statistical_in) / f64::from(total);
    eprintln!(
        "expanded intervals covered {expanded_in}/{total} = {share:.3}; \
         statistical alone {statistical_in}/{total} = {statistical:.3}; mean u_stat {:.1} ps",
        u_stat_sum / f64::from(total)
    );
    // Binomial, 800 trials at p = 0.95: 3 sigma is ±0.023.
    assert!(
        (0.927..=0.973).contains(&share),
        "coverage {share:.3} over {total}"
    );
    // The bench's errors are as large as the statistical ones: ignoring them must show.
    assert!(
        statistical < 0.85,
        "statistical alone covered {statistical:.3}"
    );
}

/// The demo bench with each `(from, to)` edit made.
fn demo_bench_with(edits: &[(&str, &str)]) -> String {
    shipped_with("recipes/benches/sim-demo.toml", edits)
}

#[test]
fn certificate_values_enter_the_table_and_the_budget() {
    // Cable: U = 8 ps at k = 2, so u = 4 ps, contribution 2·4 = 8 ps (GUM 4.3.3, design §6).
    // Reference: U = 6 ps at k = 2 with 30 dof, u = 3 ps, contribution 3 ps. Attenuator:
    // u = 0.5 ps, contribution 1 ps. u_bench = √(64 + 9 + 1) = 8.602 ps.
    let bench = demo_bench_with(&[
        (
            "cable_delay_ps = 6100.0",
            "cable_delay_ps = { value_ps = 6100.0, expanded_ps = 8.0, k = 2.0 }\n\
             atten_delay_u_ps = 0.5",
        ),
        (
            "delay_ps = 2800.0         #",
            "delay_ps = { value_ps = 2800.0, expanded_ps = 6.0, k = 2.0, dof = 30 } #",
        ),
    ]);
    let out = Taucal::new()
        .file("b.toml", &bench)
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "b.toml",
            "--out",
            "r",
        ])
        .run();
    out.expect_code(0);
    let table = out.read("r/caltable.csv");
    let header: Vec<&str> = table.lines().next().expect("header").split(',').collect();
    let column = |name: &str| header.iter().position(|h| *h == name).expect(name);
    for line in table.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        let num = |name: &str| f[column(name)].parse::<f64>().expect(name);
        assert!((num("u_bench_ps") - 74f64.sqrt()).abs() < 0.001, "{line}");
        let u_comb = (num("u_bench_ps").powi(2) + num("u_stat_ps").powi(2)).sqrt();
        assert!((num("u_comb_ps") - u_comb).abs() < 0.002, "{line}");
        // k and u_comb are written to 3 decimals: their product is good to about 0.01 ps.
        assert!(
            (num("expanded_ps") - num("k") * num("u_comb_ps")).abs() < 0.02,
            "{line}"
        );
        assert!(num("dof") >= 30.0, "{line}");
    }
    let budget = out.read("r/budget.csv");
    assert!(
        budget.contains(",cable_delay,B,normal,-2,4.000,8.000,inf"),
        "{budget}"
    );
    assert!(
        budget.contains(",reference_k,B,normal,-1,3.000,3.000,30.0"),
        "{budget}"
    );
    assert!(
        budget.contains(",atten_delay,B,normal,-2,0.500,1.000,inf"),
        "{budget}"
    );
    // The report's budget table: a row per cell, the cable's 8.0 ps in each.
    let report = out.read("r/report.html");
    let section = report
        .split("<section id=\"budget\">")
        .nth(1)
        .and_then(|s| s.split("</section>").next())
        .expect("budget section");
    assert_eq!(
        section.matches("<tr><td class=\"text\">").count(),
        3,
        "{section}"
    );
    assert_eq!(section.matches("<td>8.0</td>").count(), 3, "{section}");
}

fn refused(edits: &[(&str, &str)], words: &str) {
    let out = Taucal::new()
        .file("b.toml", &demo_bench_with(edits))
        .args([
            "check",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "b.toml",
        ])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("b.toml line "), "{}", out.stderr);
    assert!(
        out.stderr.contains(words),
        "wanted {words:?} in\n{}",
        out.stderr
    );
}

#[test]
fn bad_uncertainty_statements_are_refused_with_their_key_and_line() {
    refused(
        &[(
            "cable_delay_ps = 6100.0",
            "cable_delay_ps = { value_ps = 6100.0, expanded_ps = 8.0, k = 0.0 }",
        )],
        "`path.cable_delay_ps.k` 0 is not a coverage factor",
    );
    refused(
        &[(
            "cable_delay_ps = 6100.0",
            "cable_delay_ps = 6100.0\ncable_delay_u_ps = -1.0",
        )],
        "`path.cable_delay_u_ps` -1 is negative",
    );
    refused(
        &[(
            "delay_ps = 2800.0         #",
            "delay_ps = { value_ps = 2800.0, expanded_ps = 6.0, k = 2.0 }\ndelay_u_ps = 3.0 #",
        )],
        "`reference.delay_u_ps` is given as well as the certificate form",
    );
    refused(
        &[(
            "cable_delay_ps = 6100.0",
            "cable_delay_ps = { value_ps = 6100.0, expanded = 8.0, k = 2.0 }",
        )],
        "the certificate form is",
    );
}
