//! Every recipe and bench file shipped in the repository stays valid, and every example in
//! README.md runs as printed: the fenced blocks are parsed out of README.md itself, so the README
//! and these tests cannot drift apart, and a block no test recognises fails
//! `every_readme_block_is_run_by_a_test`.

use crate::instruments::{in_process_exchanges, Server};
use crate::support::{contract_columns, repo, root, without_bench_time, Outcome, Taucal};

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
        // Without --bench: the bench the recipe names, else the built-in demo bench.
        let out = Taucal::new().args(["check", recipe.as_str()]).run();
        out.expect_code(0);
        assert!(
            out.stdout.contains("check passed"),
            "{recipe}: {}",
            out.stdout
        );
    }
}

#[test]
fn a_recipe_names_its_default_bench_and_bench_overrides_it() {
    let soak = repo("recipes/overnight-soak.toml");
    let out = Taucal::new().args(["check", &soak]).run();
    out.expect_code(0);
    assert!(
        out.stdout
            .contains("bench `saltmarsh-bench-3 with chamber (simulated)` is SIMULATED"),
        "{}",
        out.stdout
    );
    assert!(
        out.stderr
            .contains("benches/overnight-soak.toml, the bench the recipe names"),
        "{}",
        out.stderr
    );
    // --bench wins: the demo bench has no chamber, so the soak stages are refused.
    let out = Taucal::new()
        .args([
            "check",
            &soak,
            "--bench",
            &repo("recipes/benches/sim-demo.toml"),
        ])
        .run();
    out.expect_code(2);
    assert!(out.stderr.contains("chamber"), "{}", out.stderr);
    // A recipe that names no bench keeps the built-in one.
    let out = Taucal::new()
        .args(["check", &repo("recipes/rx-gain-sweep.toml")])
        .run();
    out.expect_code(0);
    assert!(
        out.stdout
            .contains("bench `saltmarsh-bench-3 (simulated)` is SIMULATED"),
        "{}",
        out.stdout
    );
}

#[test]
fn a_default_bench_that_is_missing_or_not_a_path_is_refused_at_its_key() {
    let recipe = "[recipe]\nname = \"x\"\nbench = BENCH\n\n[[stage]]\nname = \"s\"\nkind = \"sweep\"\ncenter_mhz = 5180\nbw_mhz = 80\natten_db = [40.0]\n";
    for (bench, words) in [
        ("\"benches/none.toml\"", "which is not a file"),
        ("3", "is not a string (found integer)"),
    ] {
        for cmd in ["check", "run"] {
            let out = Taucal::new()
                .file("r.toml", &recipe.replace("BENCH", bench))
                .args([cmd, "r.toml"])
                .run();
            out.expect_code(2);
            assert!(
                out.stderr
                    .contains("taucal: r.toml line 3, column 9: `recipe.bench`"),
                "{}",
                out.stderr
            );
            assert!(out.stderr.contains(words), "{}", out.stderr);
            assert!(!out.has_dir("runs"));
        }
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

/// One fenced block of README.md, its indentation removed.
#[derive(Debug, Clone)]
struct Block {
    /// The fence's language tag (`sh`, `toml`, or empty).
    lang: String,
    /// The lines between the fences.
    text: String,
    /// 1-based line of the opening fence.
    line: usize,
}

/// What a README block is, and so which test runs it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kind {
    /// `cargo run --release -- …` and `cargo test --release`.
    QuickStart,
    /// A bench's `[[slot]]` table, as the shipped station bench has it.
    Slot,
    /// The command synopsis.
    Synopsis,
    /// `taucal sim serve` and a run through the served instruments.
    Served,
    /// The printed error.
    ErrorScreen,
    /// The annotated recipe.
    Recipe,
    /// The annotated `cells` stage.
    CellsStage,
    /// The annotated simulated bench.
    SimBench,
    /// Roles on real instruments.
    RealRoles,
    /// The attenuator served over HiSLIP and VXI-11 and runs through its VISA resource strings.
    Visa,
    /// A malformed resource string refused, as printed (a `$ ` command, then its stderr).
    VisaRefused,
    /// Roles reached through a program (`exec:`).
    ExecRoles,
    /// A real bench's `[timing]`.
    Timing,
    /// The annotated driver file.
    Driver,
    /// A recipe's `[faults]`.
    Faults,
    /// A bench's `[path]` from Touchstone files.
    MeasuredPath,
    /// A reference unit's certificate file.
    Certificate,
    /// A simulated fleet, then its pages served.
    FleetServe,
    /// Lines of `taucal` commands on the repository's files.
    Commands,
    /// Runs into the results store and the store commands on them, in one directory.
    Store,
    /// A simulated fleet and the fleet commands on its store, in one directory.
    Fleet,
    /// A simulated fleet and a reduced plan made from it, in one directory.
    Plan,
    /// The exact stdout of the single command in the block before it.
    Output,
    /// The Performance section's reproduction.
    Performance,
}

fn readme() -> String {
    std::fs::read_to_string(root().join("README.md")).expect("README.md")
}

fn readme_blocks() -> Vec<Block> {
    let mut blocks = Vec::new();
    let mut open: Option<(usize, Block)> = None;
    for (i, line) in readme().lines().enumerate() {
        let body = line.trim_start();
        let indent = line.len() - body.len();
        match open.take() {
            None => {
                if let Some(lang) = body.strip_prefix("```") {
                    let block = Block {
                        lang: lang.trim().to_string(),
                        text: String::new(),
                        line: i + 1,
                    };
                    open = Some((indent, block));
                }
            }
            Some((fence_indent, block)) if body == "```" && indent == fence_indent => {
                blocks.push(block);
            }
            Some((fence_indent, mut block)) => {
                block
                    .text
                    .push_str(line.get(fence_indent..).unwrap_or(body));
                block.text.push('\n');
                open = Some((fence_indent, block));
            }
        }
    }
    assert!(open.is_none(), "README.md ends inside a code block");
    blocks
}

/// The block's commands: non-empty lines without their trailing `# comment`.
fn commands(block: &Block) -> Vec<String> {
    block
        .text
        .lines()
        .map(|l| l.split(" #").next().unwrap_or("").trim().to_string())
        .filter(|l| !l.is_empty())
        .collect()
}

fn kind_of(block: &Block, previous: Option<&Block>) -> Option<Kind> {
    let text = block.text.as_str();
    let single_command =
        |b: &Block| kind_of(b, None) == Some(Kind::Commands) && commands(b).len() == 1;
    Some(match block.lang.as_str() {
        "sh" if text.contains("cargo run --release --") => Kind::QuickStart,
        "sh" if text.contains("cargo bench --bench scale") => Kind::Performance,
        "sh" if text.contains("::INSTR") => Kind::Visa,
        "sh" if text.contains("taucal sim serve") => Kind::Served,
        "sh" if text.contains("taucal store ") => Kind::Store,
        "sh" if text.contains("taucal fleet plan") => Kind::Plan,
        "sh" if text.contains("taucal fleet serve") => Kind::FleetServe,
        "sh" if text.contains("taucal sim fleet") => Kind::Fleet,
        "sh" if commands(block).iter().all(|c| c.starts_with("taucal ")) => Kind::Commands,
        "" if text.starts_with("taucal run RECIPE") => Kind::Synopsis,
        "" if text.starts_with("taucal: my-recipe.toml") => Kind::ErrorScreen,
        "" if text.starts_with("$ taucal ") && text.contains("::INSTR") => Kind::VisaRefused,
        "" if previous.is_some_and(single_command) => Kind::Output,
        "toml" if text.starts_with("[recipe]") => Kind::Recipe,
        "toml" if text.starts_with("[[stage]]") && text.contains("kind = \"cells\"") => {
            Kind::CellsStage
        }
        "toml" if text.starts_with("[bench]\nname") => Kind::SimBench,
        "toml" if text.starts_with("[bench]\ndrivers_dir") => Kind::RealRoles,
        "toml" if text.starts_with("[roles]") && text.contains("exec:") => Kind::ExecRoles,
        "toml" if text.starts_with("[timing]") => Kind::Timing,
        "toml" if text.starts_with("[driver]") => Kind::Driver,
        "toml" if text.starts_with("[faults]") => Kind::Faults,
        "toml" if text.starts_with("[path]\ntouchstone") => Kind::MeasuredPath,
        "toml" if text.starts_with("[certificate]") => Kind::Certificate,
        "toml" if text.starts_with("[[slot]]") => Kind::Slot,
        _ => return None,
    })
}

/// Every block of a kind, with the block after each (an `Output` belongs to the one before).
fn blocks_of(kind: Kind) -> Vec<(Block, Option<Block>)> {
    let blocks = readme_blocks();
    let mut found = Vec::new();
    for (i, b) in blocks.iter().enumerate() {
        let previous = i.checked_sub(1).map(|p| &blocks[p]);
        if kind_of(b, previous) == Some(kind) {
            let next = blocks
                .get(i + 1)
                .filter(|n| kind_of(n, Some(b)) == Some(Kind::Output))
                .cloned();
            found.push((b.clone(), next));
        }
    }
    assert!(!found.is_empty(), "README.md has no {kind:?} block");
    found
}

fn the_block(kind: Kind) -> Block {
    let mut all = blocks_of(kind);
    assert_eq!(all.len(), 1, "one {kind:?} block expected");
    all.remove(0).0
}

/// A README command line as arguments of the binary (no quoting is used in the README).
fn taucal_args(command: &str) -> Vec<String> {
    let rest = command
        .strip_prefix("taucal ")
        .unwrap_or_else(|| panic!("not a taucal command: {command}"));
    rest.split_whitespace().map(String::from).collect()
}

/// Runs a README command in a copy of the repository's recipes, drivers and demo data.
fn run_as_printed(command: &str) -> Outcome {
    Taucal::new()
        .with_repo(&["recipes", "drivers", "demo-data"])
        .args(taucal_args(command))
        .run()
}

#[test]
fn every_readme_block_is_run_by_a_test() {
    let blocks = readme_blocks();
    assert!(blocks.len() >= 12, "{} blocks", blocks.len());
    for (i, b) in blocks.iter().enumerate() {
        let previous = i.checked_sub(1).map(|p| &blocks[p]);
        assert!(
            kind_of(b, previous).is_some(),
            "README.md line {}: a ```{} block no test runs:\n{}",
            b.line,
            b.lang,
            b.text
        );
    }
}

#[test]
fn readme_quick_start_runs_as_printed() {
    let block = the_block(Kind::QuickStart);
    for command in commands(&block) {
        if command == "cargo test --release" {
            continue; // the suite this test is part of
        }
        let args = command
            .strip_prefix("cargo run --release -- ")
            .unwrap_or_else(|| panic!("unexpected quick-start line: {command}"));
        let out = Taucal::new()
            .with_repo(&["recipes"])
            .args(args.split_whitespace())
            .run();
        out.expect_code(0);
        assert!(out.stdout.contains("calibration table"), "{}", out.stdout);
        assert!(
            out.stderr.contains("SIMULATED"),
            "it says so: {}",
            out.stderr
        );
        let mut runs: Vec<_> = std::fs::read_dir(out.path("runs"))
            .expect("runs/")
            .filter_map(|e| e.ok())
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .collect();
        runs.sort();
        // The run's directory, and the default results store beside it.
        assert!(
            runs.len() == 2 && runs[0].ends_with("-rx-gain-sweep") && runs[1] == "taucal.sqlite",
            "{runs:?}"
        );
    }
}

#[test]
fn readme_synopsis_matches_the_commands_and_their_options() {
    let block = the_block(Kind::Synopsis);
    let lines = commands(&block);
    for line in &lines {
        let words: Vec<&str> = line.split_whitespace().skip(1).collect();
        let sub: Vec<&str> = words
            .iter()
            .take_while(|w| {
                !w.starts_with('-') && w.chars().all(|c| c.is_ascii_lowercase() || c == '-')
            })
            .copied()
            .collect();
        assert!(!sub.is_empty(), "{line}");
        let help = Taucal::new()
            .args(sub.iter().copied())
            .args(["--help"])
            .run();
        help.expect_code(0);
        for flag in line
            .split(|c: char| c.is_whitespace() || "[]=".contains(c))
            .filter(|w| w.starts_with("--"))
        {
            assert!(
                help.stdout.contains(flag),
                "`taucal {}` has no {flag}:\n{}",
                sub.join(" "),
                help.stdout
            );
        }
    }
    // And every command taucal has is in the synopsis.
    let help = Taucal::new().args(["--help"]).run();
    let listed: Vec<&str> = help
        .stdout
        .lines()
        .skip_while(|l| !l.starts_with("Commands:"))
        .skip(1)
        .take_while(|l| !l.trim().is_empty())
        .filter_map(|l| l.split_whitespace().next())
        .filter(|c| *c != "help")
        .collect();
    assert!(listed.len() >= 9, "{}", help.stdout);
    for command in listed {
        assert!(
            lines
                .iter()
                .any(|l| l.starts_with(&format!("taucal {command} "))),
            "`taucal {command}` is missing from the README's synopsis"
        );
    }
}

#[test]
fn readme_served_run_records_the_in_process_exchanges() {
    let block = the_block(Kind::Served);
    let lines = commands(&block);
    assert_eq!(lines.len(), 2, "{lines:?}");
    // Port 5025 may be taken on a shared machine: the same listeners on free ports.
    let listen: Vec<String> = taucal_args(&lines[0])
        .windows(2)
        .filter(|w| w[0] == "--listen")
        .map(|w| w[1].replace("tcp:127.0.0.1:5025", "tcp:127.0.0.1:0"))
        .collect();
    assert_eq!(listen.len(), 2, "{listen:?}");
    let listen: Vec<&str> = listen.iter().map(String::as_str).collect();
    let server = Server::start_bench(&repo("recipes/benches/sim-demo.toml"), &listen);
    let dut = server.address("dut");
    assert!(dut.starts_with("serial:/dev/pts/"), "{dut}");
    let args: Vec<String> = taucal_args(&lines[1])
        .into_iter()
        .map(|a| a.replace("serial:/dev/pts/N", &dut))
        .collect();
    let got = readme_run_exchanges(args, format!("attenuator={}", server.address("attenuator")));
    assert!(
        got == in_process_exchanges(),
        "served and in-process exchanges differ"
    );
}

/// Runs `args` (a README `taucal run` line with its addresses filled in) with `connect` added,
/// in a copy of the repository's recipes and drivers, recording into `run`: the exchanges it
/// recorded, bench time left out.
fn readme_run_exchanges(mut args: Vec<String>, connect: String) -> String {
    args.extend(["--connect".into(), connect, "--out".into(), "run".into()]);
    let out = Taucal::new()
        .with_repo(&["recipes", "drivers"])
        .args(args)
        .run();
    out.expect_code(0);
    without_bench_time(&out.read("run/exchanges.csv"))
}

/// The address with its port set to 0 (a VXI-11 address's portmapper port), to compare an
/// address as written with the one a server on a free port announces.
fn on_any_port(address: &str) -> taucal::instrument::transport::Address {
    use taucal::instrument::transport::Address;
    match Address::parse(address).unwrap_or_else(|e| panic!("{address}: {e}")) {
        Address::Vxi11 { host, device, .. } => Address::Vxi11 {
            host,
            device,
            portmapper_port: 0,
        },
        Address::Hislip { host, device, .. } => Address::Hislip {
            host,
            device,
            port: 0,
        },
        Address::Tcp { host, .. } => Address::Tcp { host, port: 0 },
        other => other,
    }
}

#[test]
fn readme_visa_runs_record_the_in_process_exchanges() {
    // Whole lines: the server's comment says what it prints.
    let block = the_block(Kind::Visa);
    let lines: Vec<&str> = block
        .text
        .lines()
        .filter(|l| !l.trim().is_empty())
        .collect();
    assert_eq!(lines.len(), 4, "{lines:?}");
    let want = in_process_exchanges();
    for pair in lines.chunks(2) {
        let (serve, written) = pair[0]
            .split_once("   # prints attenuator ")
            .map(|(c, p)| (c.to_string(), p.to_string()))
            .unwrap_or_else(|| panic!("{}: says what it prints", pair[0]));
        let serve = taucal_args(serve.trim());
        // Fixed ports may be taken on a shared machine, and 111 needs privileges: the same
        // listeners on ports of the system's choosing.
        let listen: Vec<String> = serve
            .windows(2)
            .filter(|w| w[0] == "--listen")
            .map(|w| match w[1].rsplit_once(':') {
                Some((rest, port)) if port.parse::<u16>().is_ok() => format!("{rest}:0"),
                _ => w[1].clone(),
            })
            .collect();
        assert_eq!(listen.len(), 2, "{listen:?}");
        let listen: Vec<&str> = listen.iter().map(String::as_str).collect();
        let server = Server::start_with(
            &repo("recipes/benches/sim-demo.toml"),
            &listen,
            &["--portmapper-port", "0"],
        );
        let announced = server.address("attenuator");
        assert_eq!(
            on_any_port(&announced),
            on_any_port(&written),
            "announced {announced}, the README says {written}"
        );
        let mut run = taucal_args(pair[1].trim());
        let at = run
            .iter()
            .position(|a| a == &format!("attenuator={written}"))
            .unwrap_or_else(|| panic!("{}: connects to what the server printed", pair[1]));
        run[at] = format!("attenuator={announced}");
        let got = readme_run_exchanges(run, format!("dut={}", server.address("dut")));
        assert!(
            got == want,
            "{written}: served and in-process exchanges differ"
        );
    }
}

#[test]
fn readme_refused_resource_string_is_what_run_prints() {
    let block = the_block(Kind::VisaRefused);
    let (command, printed) = block
        .text
        .split_once('\n')
        .expect("a command, then its output");
    let out = Taucal::new()
        .with_repo(&["recipes", "drivers"])
        .args(taucal_args(command.trim_start_matches("$ ")))
        .run();
    out.expect_code(2);
    assert!(
        out.stderr.contains(printed),
        "README:\n{printed}\nstderr:\n{}",
        out.stderr
    );
    assert!(!out.has_dir("runs"), "nothing ran");
}

#[test]
fn readme_exec_roles_record_the_in_process_exchanges() {
    // The block's roles in the demo bench, with the binary under test for `taucal`, a free
    // port for 5026 (it may be taken on a shared machine) and the repository's bench path.
    let roles: toml::Table = toml::from_str(&the_block(Kind::ExecRoles).text).expect("roles");
    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .and_then(|l| l.local_addr())
        .expect("a free port")
        .port();
    let text = toml::to_string(&roles)
        .expect("toml")
        .replace(
            "exec:taucal ",
            &format!("exec:{} ", env!("CARGO_BIN_EXE_taucal")),
        )
        .replace(":5026", &format!(":{port}"))
        .replace(
            " recipes/benches/sim-demo.toml",
            &format!(" {}", repo("recipes/benches/sim-demo.toml")),
        );
    let roles: toml::Table = toml::from_str(&text).expect("roles");
    let mut bench: toml::Table = toml::from_str(
        &std::fs::read_to_string(root().join("recipes/benches/sim-demo.toml")).expect("demo"),
    )
    .expect("demo bench");
    bench.insert("roles".into(), roles["roles"].clone());
    if let Some(toml::Value::Table(b)) = bench.get_mut("bench") {
        b.insert("drivers_dir".into(), repo("drivers").into());
    }
    let out = Taucal::new()
        .file("exec.toml", &toml::to_string(&bench).expect("toml"))
        .args([
            "run",
            &repo("recipes/rx-gain-sweep.toml"),
            "--bench",
            "exec.toml",
            "--out",
            "run",
        ])
        .run();
    out.expect_code(0);
    let log = out.read("run/run.log");
    // What the program says on stderr is in the run log, and it was ended with the run.
    assert!(
        log.contains(&format!("stderr: dut tcp:127.0.0.1:{port}")),
        "{log}"
    );
    assert!(log.contains("the program ended (exit status: 0)"), "{log}");
    assert!(
        without_bench_time(&out.read("run/exchanges.csv")) == in_process_exchanges(),
        "exchanges through the exec'd server differ from the in-process run"
    );
}

#[test]
fn readme_error_screen_is_what_check_prints() {
    let screen = the_block(Kind::ErrorScreen);
    // Line 14 holds the stage's atten_db, as in the README's example.
    let recipe = "[recipe]\n\
                  name = \"my-recipe\"\n\
                  description = \"A sweep that starts too close to the DUT\"\n\
                  \n\
                  [vars]\n\
                  bursts_per_point = 4\n\
                  \n\
                  [[stage]]\n\
                  name = \"sweep\"\n\
                  kind = \"sweep\"\n\
                  center_mhz = 5180\n\
                  bw_mhz = 80\n\
                  frames = 16\n\
                  atten_db = [10.0, 20.0]\n\
                  bursts = \"$bursts_per_point\"\n";
    for cmd in ["check", "run"] {
        let out = Taucal::new()
            .file("my-recipe.toml", recipe)
            .args([cmd, "my-recipe.toml"])
            .run();
        out.expect_code(2);
        assert!(
            out.stderr.contains(&screen.text),
            "{cmd} printed\n{}\nthe README shows\n{}",
            out.stderr,
            screen.text
        );
    }
}

/// `taucal check`, then `taucal run` into `run`, of the recipe text `recipe`, each of which
/// must succeed: the run's outcome.
fn checked_and_run(recipe: &str) -> Outcome {
    let out = Taucal::new()
        .file("r.toml", recipe)
        .args(["check", "r.toml"])
        .run();
    out.expect_code(0);
    let out = Taucal::in_dir(out.dir)
        .args(["run", "r.toml", "--out", "run"])
        .run();
    out.expect_code(0);
    out
}

#[test]
fn readme_recipe_checks_and_runs_as_printed() {
    let recipe = the_block(Kind::Recipe);
    let out = checked_and_run(&recipe.text);
    for file in ["caltable.csv", "verify.csv", "manifest.toml"] {
        assert!(out.path(&format!("run/{file}")).is_file(), "{file}");
    }
    // With the README's [faults] added, it is still a valid recipe.
    let faults = the_block(Kind::Faults);
    let out = Taucal::new()
        .file("f.toml", &format!("{}\n{}", recipe.text, faults.text))
        .args(["check", "f.toml"])
        .run();
    out.expect_code(0);
}

#[test]
fn readme_cells_stage_checks_and_runs_as_printed_and_is_factory_quicks() {
    let stage = the_block(Kind::CellsStage);
    let recipe = format!(
        "[recipe]\nname = \"cells\"\n\n[accept]\nmax_ci95_ps = 50.0\nmin_gain_states = 3\n\n{}",
        stage.text
    );
    let out = checked_and_run(&recipe);
    assert!(out.path("run/gainmap.csv").is_file());
    // The same values as the shipped recipe's, variables resolved: the README shows what runs.
    let quick = std::fs::read_to_string(root().join("recipes/factory-quick.toml")).expect("recipe");
    for (vars, printed) in [
        (
            &[
                "map_from_db = 26.0",
                "map_to_db = 71.0",
                "map_step_db = 3.0",
            ][..],
            "map_db = { from = 26.0, to = 71.0, step = 3.0 }",
        ),
        (&["margin_db = 2.0"], "margin_db = 2.0"),
        (&["min_bursts = 10"], "\nbursts = 10"),
        (&["max_bursts = 200"], "max_bursts = 200"),
        (&["frames_per_burst = 16"], "frames = 16"),
        (&["settle_ms = 20.0"], "settle_ms = 20.0"),
        (&["target_ci95_ps = 50.0"], "target_ci95_ps = 50.0"),
    ] {
        assert!(
            stage.text.contains(printed),
            "the README's stage lacks {printed:?}"
        );
        for var in vars {
            assert!(quick.contains(var), "factory-quick lacks {var:?}");
        }
    }
}

#[test]
fn readme_simulated_bench_is_valid() {
    let bench = the_block(Kind::SimBench);
    let out = Taucal::new()
        .with_repo(&["recipes"])
        .file("b.toml", &bench.text)
        .args(["check", "recipes/rx-gain-sweep.toml", "--bench", "b.toml"])
        .run();
    out.expect_code(0);
    assert!(out.stdout.contains("is SIMULATED"), "{}", out.stdout);
}

#[test]
fn readme_slot_table_is_the_shipped_stations_and_its_run_lists_every_slot() {
    let block = the_block(Kind::Slot);
    let station = std::fs::read_to_string(root().join("recipes/benches/sim-station4.toml"))
        .expect("station bench");
    assert!(station.contains(&block.text), "{}", block.text);
    // The commands block beside it runs as printed (readme_commands_…); its station run
    // holds a standard run directory per slot.
    let out = run_as_printed(
        "taucal run recipes/factory-quick.toml --bench recipes/benches/sim-station4.toml --out runs/station",
    );
    out.expect_code(0);
    let top: toml::Table = toml::from_str(&out.read("runs/station/manifest.toml")).expect("toml");
    assert_eq!(top["kind"].as_str(), Some("station"));
    for slot in ["a", "b", "c", "d"] {
        assert!(out
            .path(&format!("runs/station/slot-{slot}/caltable.csv"))
            .is_file());
    }
}

/// The README's simulated bench with the README's real roles (its `[sim]` stays, for the
/// reference, which this build does not drive).
fn readme_real_bench(attenuator_driver: &str, timing: Option<&str>) -> String {
    let mut bench: toml::Table =
        toml::from_str(&the_block(Kind::SimBench).text).expect("bench block");
    let roles: toml::Table = toml::from_str(&the_block(Kind::RealRoles).text).expect("roles block");
    for (key, value) in roles {
        match (bench.get_mut(&key), value) {
            (Some(toml::Value::Table(into)), toml::Value::Table(from)) => into.extend(from),
            (_, value) => {
                bench.insert(key, value);
            }
        }
    }
    if let Some(toml::Value::Table(roles)) = bench.get_mut("roles") {
        if let Some(toml::Value::Table(att)) = roles.get_mut("attenuator") {
            att.insert("driver".into(), attenuator_driver.into());
        }
    }
    let mut text = toml::to_string(&bench).expect("toml");
    if let Some(t) = timing {
        text.push('\n');
        text.push_str(t);
    }
    text
}

#[test]
fn readme_real_bench_driver_and_timing_pass_check() {
    let timing = the_block(Kind::Timing);
    let driver = the_block(Kind::Driver);
    let timing_line = |stdout: &str| {
        stdout
            .lines()
            .find(|l| l.contains("burst setup"))
            .unwrap_or_else(|| panic!("no timing line in\n{stdout}"))
            .split(": ")
            .nth(1)
            .unwrap_or_default()
            .to_string()
    };
    let check = |bench: String| {
        let out = Taucal::new()
            .with_repo(&["recipes", "drivers"])
            .file("drivers/readme-attenuator.toml", &driver.text)
            .file("recipes/benches/real.toml", &bench)
            .args([
                "check",
                "recipes/rx-gain-sweep.toml",
                "--bench",
                "recipes/benches/real.toml",
            ])
            .run();
        out.expect_code(0);
        assert!(
            out.stdout.contains("drives real instruments"),
            "{}",
            out.stdout
        );
        out
    };
    // As printed (the shipped attenuator driver), without [timing]: the defaults, said so.
    let plain = check(readme_real_bench("brackwater-tidegate95", None));
    assert!(
        plain
            .stdout
            .contains("timing by default (the bench file has no [timing])"),
        "{}",
        plain.stdout
    );
    // The README's driver file in its place, with the README's [timing], which shows the
    // defaults: the same durations, now from the bench.
    let timed = check(readme_real_bench("readme-attenuator", Some(&timing.text)));
    assert!(
        timed.stdout.contains("timing from the bench's [timing]"),
        "{}",
        timed.stdout
    );
    assert_eq!(timing_line(&plain.stdout), timing_line(&timed.stdout));
}

#[test]
fn readme_commands_on_the_demo_data_run_as_printed() {
    let mut ran = 0;
    for (block, output) in blocks_of(Kind::Commands) {
        for command in commands(&block) {
            let out = run_as_printed(&command);
            out.expect_code(0);
            ran += 1;
            if let Some(expected) = &output {
                assert_eq!(
                    out.stdout, expected.text,
                    "README.md line {}: {command}",
                    block.line
                );
            }
            let args = taucal_args(&command);
            match args[0].as_str() {
                // "prints the run's caltable.csv again" (the stored run's table is of the
                // older layout: the budget columns are appended to it)
                "fit" => {
                    let table = args[1].replace("exchanges.csv", "caltable.csv");
                    assert_eq!(
                        contract_columns(&out.stdout),
                        contract_columns(&out.read(&table)),
                        "{command}"
                    );
                }
                "report" => {
                    let page = out.read(&format!("{}/report.html", args[1]));
                    assert!(page.contains("<svg"), "{command}");
                }
                "export" => {
                    let doc: serde_json::Value =
                        serde_json::from_str(&out.stdout).expect("JSON document");
                    assert_eq!(doc["format"], "taucal-k-table", "{command}");
                }
                _ => {}
            }
        }
    }
    assert!(ran >= 5, "{ran} commands");
}

#[test]
fn readme_performance_options_are_the_benchmarks_own() {
    let text = readme();
    let section = text
        .split("\n## Performance")
        .nth(1)
        .and_then(|s| s.split("\n## ").next())
        .expect("Performance section");
    let bench = std::fs::read_to_string(root().join("benches/scale.rs")).expect("scale.rs");
    let store = std::fs::read_to_string(root().join("benches/store.rs")).expect("store.rs");
    let mut options: Vec<&str> = section
        .split(|c: char| !(c.is_ascii_alphanumeric() || c == '-'))
        .filter(|w| w.starts_with("--") && w[2..].starts_with(|c: char| c.is_ascii_lowercase()))
        .collect();
    options.sort_unstable();
    options.dedup();
    assert!(options.len() >= 8, "{options:?}");
    for option in options {
        assert!(
            bench.contains(&format!("\"{option}\" =>"))
                || store.contains(&format!("== \"{option}\"")),
            "README's {option} is not an option of benches/scale.rs or benches/store.rs"
        );
    }
    // The baseline it names is in the repository, and the bench runs that file.
    assert!(section.contains("`benches/baseline_fit.py`"));
    let baseline =
        std::fs::read_to_string(root().join("benches/baseline_fit.py")).expect("baseline");
    assert!(baseline.contains("import pandas") && baseline.contains("import numpy"));
    assert!(bench.contains("root.join(\"benches/baseline_fit.py\")"));
    let block = the_block(Kind::Performance);
    assert!(
        block.text.contains("pip install pandas numpy"),
        "{}",
        block.text
    );
}

/// Runs a README block's commands one after the other in one copy of the repository's recipes
/// and drivers, each expected to succeed; returns the directory and each command's stdout.
fn run_block_in_one_directory(kind: Kind) -> (tempfile::TempDir, Vec<String>) {
    let mut dir = Taucal::new()
        .with_repo(&["recipes", "drivers"])
        .args(["--version"])
        .run()
        .dir;
    let mut outputs = Vec::new();
    for command in commands(&the_block(kind)) {
        let out = Taucal::in_dir(dir).args(taucal_args(&command)).run();
        out.expect_code(0);
        outputs.push(out.stdout.clone());
        dir = out.dir;
    }
    (dir, outputs)
}

#[test]
fn readme_store_block_runs_as_printed_in_one_directory() {
    let (dir, outputs) = run_block_in_one_directory(Kind::Store);
    let units = &outputs[2];
    assert!(
        units.contains("SN-0412") && units.contains("SN-0413"),
        "{units}"
    );
    // The table for firmware is what `export` makes of the unit's run.
    let export = Taucal::in_dir(dir)
        .args(["export", "runs/sn0412", "--format", "c"])
        .run();
    export.expect_code(0);
    assert_eq!(outputs[3], export.stdout);
    assert!(outputs[4].contains("2 runs copied"), "{}", outputs[4]);
    assert!(export.path("line4-central.sqlite").is_file());
}

#[test]
fn readme_fleet_example_runs_as_printed() {
    let (dir, outputs) = run_block_in_one_directory(Kind::Fleet);
    assert!(
        outputs[0].contains("calibrated 200 units"),
        "{}",
        outputs[0]
    );
    assert_eq!(
        std::fs::read_to_string(dir.path().join("truth.csv"))
            .expect("truth")
            .lines()
            .count(),
        1 + 200 * 3
    );
    assert!(
        outputs[1].contains("tol_lo_ps") && outputs[1].contains("unit_sd_ps"),
        "{}",
        outputs[1]
    );
    // The station the bench gave a 40 ps longer path is the one flagged.
    let flagged: Vec<&str> = outputs[2]
        .lines()
        .filter(|l| l.trim_end().ends_with("yes"))
        .collect();
    assert_eq!(flagged.len(), 1, "{}", outputs[2]);
    assert!(flagged[0].starts_with("line-d"), "{}", outputs[2]);
}

#[test]
fn readme_fleet_serve_example_serves_the_fleet() {
    use crate::fleet_pages::{table, Server};
    let lines = commands(&the_block(Kind::FleetServe));
    assert_eq!(lines.len(), 2, "{lines:?}");
    let out = run_as_printed(&lines[0]);
    out.expect_code(0);
    assert!(out.stdout.contains("calibrated 60 units"), "{}", out.stdout);
    // The server as printed, but on a free port (tests run side by side, and a fixed port may
    // be taken): everything after `serve` up to --listen is passed as written.
    let args = taucal_args(&lines[1]);
    assert_eq!(&args[..2], ["fleet", "serve"]);
    let listen = args.iter().position(|a| a == "--listen").expect("--listen");
    assert_eq!(args[listen + 1], "127.0.0.1:8090");
    let rest: Vec<&str> = args[2..listen].iter().map(String::as_str).collect();
    assert_eq!(rest, ["--store", "sqlite:line2.sqlite"]);
    let server = Server::start(out.dir.path(), rest[1], &[]);
    assert_eq!(table(&server.page("/"), "units").len(), 60);
    let stations = table(&server.page("/stations"), "stations");
    let flagged: Vec<&str> = stations
        .iter()
        .filter(|r| r[4] == "yes")
        .map(|r| r[0].as_str())
        .collect();
    assert_eq!(flagged, ["line-d"], "{stations:?}");
}

#[test]
fn readme_plan_example_runs_as_printed() {
    let (dir, outputs) = run_block_in_one_directory(Kind::Plan);
    assert!(
        outputs[0].contains("calibrated 200 units"),
        "{}",
        outputs[0]
    );
    let plan = &outputs[1];
    let action = |a: &str| {
        plan.lines()
            .filter(|l| l.split_whitespace().nth(3) == Some(a))
            .count()
    };
    assert_eq!((action("measure"), action("predict")), (1, 2), "{plan}");
    assert!(
        plan.contains("validate: leaving each of 200 units out"),
        "{plan}"
    );
    assert!(plan.contains("validate: exchanges per unit"), "{plan}");
    let model = std::fs::read_to_string(dir.path().join("model.toml")).expect("model");
    assert_eq!(model.matches("[[cell]]").count(), 3, "{model}");
    assert!(outputs[2].contains("check passed"), "{}", outputs[2]);
}

#[test]
fn readme_measured_path_is_the_shipped_benchs() {
    // The shipped bench is checked with every bench and run by the Commands block after it.
    let block = the_block(Kind::MeasuredPath);
    let shipped = std::fs::read_to_string(root().join("recipes/benches/sim-measured-path.toml"))
        .expect("shipped bench");
    assert!(shipped.contains(&block.text), "{}", block.text);
}

#[test]
fn readme_certificate_file_is_read_as_printed() {
    let block = the_block(Kind::Certificate);
    let setup = Taucal::new()
        .with_repo(&["recipes", "demo-data"])
        .file("demo-data/readme-certificate.toml", &block.text);
    let bench = setup.dir().join("recipes/benches/sim-measured-path.toml");
    let text = std::fs::read_to_string(&bench).expect("bench");
    assert!(text.contains("heron-ref-certificate.toml"));
    std::fs::write(
        &bench,
        text.replace("heron-ref-certificate.toml", "readme-certificate.toml"),
    )
    .expect("write bench");
    let out = setup
        .args([
            "check",
            "recipes/rx-gain-sweep.toml",
            "--bench",
            "recipes/benches/sim-measured-path.toml",
        ])
        .run();
    out.expect_code(0);
    assert!(
        out.stdout.contains(
            "reference K from certificate HVT-2026-0142 (Hollin Vale Timing Laboratory), \
             issued 2026-02-10, due 2027-02-10"
        ),
        "{}",
        out.stdout
    );
}
