//! `cargo bench --bench slots`: a station's throughput (README, Performance). The same recipe
//! (`recipes/factory-quick.toml`) runs on the four-slot simulated station
//! (`recipes/benches/sim-station4.toml`) and, side by side, on one-slot stations holding each
//! of its units alone. The figure is the ratio of the four-slot station's bench time to a
//! one-slot station's (the mean of the four), for the same seeds; target ≤ 1.4. Bench time is
//! the simulated clock: slots overlap their settling and instrument time and contend only for
//! the shared reference's air time.
//!
//! A second figure isolates the contention for the reference: the same recipe with its bursts
//! fixed (`--set max_bursts=10`, the pilot alone), where every unit takes the same time alone,
//! so whatever the station takes beyond one slot is waiting for the reference.
//!
//! `--smoke` (CI) runs 3 seeds; the default runs 20.

use std::path::{Path, PathBuf};
use std::process::Command;

type Error = Box<dyn std::error::Error>;

const TARGET_RATIO: f64 = 1.4;

fn main() -> Result<(), Error> {
    let smoke = std::env::args().any(|a| a == "--smoke");
    let seeds: u64 = if smoke { 3 } else { 20 };
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let recipe = root.join("recipes/factory-quick.toml");
    let station_file = root.join("recipes/benches/sim-station4.toml");
    let station: toml::Table = toml::from_str(&std::fs::read_to_string(&station_file)?)?;
    let slots = station["slot"].as_array().map_or(0, Vec::len);
    let work = tempfile::tempdir()?;
    let singles: Vec<PathBuf> = (0..slots)
        .map(|i| {
            let path = work.path().join(format!("one-slot-{i}.toml"));
            std::fs::write(&path, toml::to_string(&one_slot(&station, i))?)?;
            Ok(path)
        })
        .collect::<Result<_, Error>>()?;
    println!(
        "slots bench: {} on a {slots}-slot station against one-slot stations, {seeds} seeds",
        recipe.display()
    );
    let mut fixed_ratios = Vec::new();
    let (mut ratios, mut station_s, mut single_s, mut wall_station, mut wall_single) =
        (Vec::new(), 0.0, 0.0, 0.0, 0.0);
    for seed in 1..=seeds {
        let (t4, w4) = run(&recipe, &station_file, seed, work.path(), &[])?;
        // Slot i of the station draws from seed + i; its unit alone does too.
        let mut alone = Vec::new();
        for (i, bench) in singles.iter().enumerate() {
            let (t, w) = run(&recipe, bench, seed + i as u64, work.path(), &[])?;
            alone.push(t);
            wall_single += w;
        }
        let mean_alone = alone.iter().sum::<f64>() / alone.len() as f64;
        ratios.push(t4 / mean_alone);
        station_s += t4;
        single_s += mean_alone;
        wall_station += w4;
        let fixed = ["--set", "max_bursts=10"];
        let (f4, _) = run(&recipe, &station_file, seed, work.path(), &fixed)?;
        let (f1, _) = run(&recipe, &singles[0], seed, work.path(), &fixed)?;
        fixed_ratios.push(f4 / f1);
    }
    let n = seeds as f64;
    let ratio = ratios.iter().sum::<f64>() / n;
    let worst = ratios.iter().copied().fold(0.0, f64::max);
    let per_hour = |units: usize, s: f64| units as f64 * 3600.0 / s;
    println!(
        "one slot:  {:.3} s bench time a unit, {:.0} units per hour",
        single_s / n,
        per_hour(1, single_s / n)
    );
    println!(
        "{slots} slots:   {:.3} s bench time a station, {:.0} units per hour",
        station_s / n,
        per_hour(slots, station_s / n)
    );
    println!(
        "ratio of {slots}-slot to one-slot bench time: mean {ratio:.3}, worst {worst:.3} (target ≤ {TARGET_RATIO})"
    );
    println!(
        "with bursts fixed (contention alone): ratio mean {:.4}, worst {:.4}",
        fixed_ratios.iter().sum::<f64>() / n,
        fixed_ratios.iter().copied().fold(0.0, f64::max)
    );
    println!(
        "wall time: {:.2} s for the stations, {:.2} s for the one-slot runs",
        wall_station, wall_single
    );
    if ratio > TARGET_RATIO {
        return Err(format!("ratio {ratio:.3} is above the target {TARGET_RATIO}").into());
    }
    Ok(())
}

/// The station with only slot `index`: its roles, its `[[slot]]` and its `[[sim.slot]]`.
fn one_slot(station: &toml::Table, index: usize) -> toml::Table {
    let mut t = station.clone();
    let slot = station["slot"][index].clone();
    let keep = [
        slot["dut"].as_str().unwrap_or_default().to_string(),
        slot["attenuator"].as_str().unwrap_or_default().to_string(),
        "reference".to_string(),
    ];
    if let Some(roles) = t.get_mut("roles").and_then(|r| r.as_table_mut()) {
        roles.retain(|role, _| keep.iter().any(|k| k == role));
    }
    t.insert("slot".into(), toml::Value::Array(vec![slot]));
    if let Some(sim) = t.get_mut("sim").and_then(|s| s.as_table_mut()) {
        let unit = sim["slot"][index].clone();
        sim.insert("slot".into(), toml::Value::Array(vec![unit]));
    }
    t
}

/// Runs `recipe` on `bench` with `seed` and `extra` arguments; returns its bench time (the station's, from its top
/// manifest) and wall time, s.
fn run(
    recipe: &Path,
    bench: &Path,
    seed: u64,
    work: &Path,
    extra: &[&str],
) -> Result<(f64, f64), Error> {
    let out = work.join(format!(
        "run-{}-{seed}-{}",
        bench.file_stem().and_then(|s| s.to_str()).unwrap_or("b"),
        extra.len()
    ));
    let status = Command::new(env!("CARGO_BIN_EXE_taucal"))
        .args(["run", "-q", "--store", "none", "--seed", &seed.to_string()])
        .arg(recipe)
        .arg("--bench")
        .arg(bench)
        .arg("--out")
        .arg(&out)
        .args(extra)
        .stdout(std::process::Stdio::null())
        .status()?;
    if !matches!(status.code(), Some(0 | 1)) {
        return Err(format!("{} on {} ended {status}", recipe.display(), bench.display()).into());
    }
    let m: toml::Table = toml::from_str(&std::fs::read_to_string(out.join("manifest.toml"))?)?;
    let time = |k: &str| m.get(k).and_then(|v| v.as_float()).ok_or(format!("no {k}"));
    Ok((time("bench_time_s")?, time("wall_time_s")?))
}
