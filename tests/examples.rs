//! Every recipe and bench file shipped in the repository stays valid.

use crate::support::{repo, root, Taucal};

fn toml_files(dir: &str) -> Vec<String> {
    let mut files: Vec<String> = std::fs::read_dir(root().join(dir))
        .expect("folder")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "toml"))
        .map(|p| p.display().to_string())
        .collect();
    files.sort();
    files
}

#[test]
fn every_recipe_passes_check_on_its_bench() {
    let recipes = toml_files("recipes");
    assert!(recipes.iter().any(|r| r.ends_with("rx-gain-sweep.toml")));
    for recipe in recipes {
        // A recipe that needs a special simulated bench has a bench file of its own name.
        let name = std::path::Path::new(&recipe)
            .file_name()
            .map(|n| n.to_string_lossy().to_string())
            .unwrap_or_default();
        let own = root().join("recipes/benches").join(&name);
        let bench = if own.is_file() {
            own.display().to_string()
        } else {
            repo("recipes/benches/sim-demo.toml")
        };
        let out = Taucal::new()
            .args(["check", recipe.as_str(), "--bench", &bench])
            .run();
        out.expect_code(0);
        assert!(
            out.stdout.contains("check passed"),
            "{recipe}: {}",
            out.stdout
        );
    }
}

#[test]
fn every_bench_file_is_valid() {
    let benches = toml_files("recipes/benches");
    assert!(!benches.is_empty());
    for bench in benches {
        let out = Taucal::new()
            .args([
                "check",
                &repo("recipes/rx-gain-sweep.toml"),
                "--bench",
                bench.as_str(),
            ])
            .run();
        out.expect_code(0);
    }
}

#[test]
fn check_prints_the_plan() {
    let out = Taucal::new()
        .args(["check", &repo("recipes/rx-gain-sweep.toml")])
        .run();
    out.expect_code(0);
    assert!(
        out.stdout.contains("usable attenuation 17..89 dB"),
        "{}",
        out.stdout
    );
    assert!(
        out.stdout
            .contains("gain map (swept up, then down) on 5180 MHz / 80 MHz: 73 points 17..89 dB"),
        "{}",
        out.stdout
    );
    assert!(
        out.stdout.contains("3 points per gain state mid-plateau"),
        "{}",
        out.stdout
    );
    assert!(
        out.stdout.contains("verified range error within 0.05 m"),
        "{}",
        out.stdout
    );
    assert!(out.stdout.contains("nothing was run"), "{}", out.stdout);
    assert!(!out.has_dir("runs"));
}
