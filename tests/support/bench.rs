//! Simulated bench files for tests, built from one base: a bench unlike the demo's (two DUT gain
//! states 340 ps apart, −14 ppm, 350 ps of jitter, no late locks) with the variations the tests
//! need — its simulated truth, its declared path and reference, slots, roles, the seed — written
//! out as bench TOML, or its `[sim]` truth alone for tests that simulate in process. Shipped
//! benches edited for a test go through [`shipped_with`], which refuses an edit that no longer
//! finds its text (a test would otherwise run the shipped bench unchanged and prove nothing).

use super::{repo, root};
use std::path::{Path, PathBuf};
use taucal::sim::SimTruth;

/// A role served in process by the simulated attenuator.
pub const SIM_ATTENUATOR: &str = r#"{ driver = "sim-attenuator", address = "sim:" }"#;
/// A role served in process by a simulated ranging unit.
pub const SIM_RANGING: &str = r#"{ driver = "sim-ranging", address = "sim:" }"#;

/// A simulated bench file, its parts kept apart until [`TestBench::text`] writes them in order.
#[derive(Clone)]
pub struct TestBench {
    name: String,
    drivers_dir: Option<String>,
    roles: Vec<(String, String)>,
    range_db: [f64; 2],
    step_db: f64,
    tx_power_dbm: f64,
    path: String,
    reference_k: String,
    slots: Vec<String>,
    seed: u64,
    sim_dut: String,
    sim_reference: String,
    sim_path: Option<String>,
    sim_slots: Vec<String>,
}

impl TestBench {
    /// The base bench: the attenuator, DUT and reference simulated in process; 0–90 dB in 1 dB
    /// steps; both units at 14 dBm with receivers limited to −80…−12 dBm; 5200 ps of cable and
    /// 7 dB of fixed loss; a reference of K = 2650 ps, declared as it is simulated; seed 3. The
    /// DUT's truth: K = 1450 + [780, 1120] ps, switching at −48 dBm.
    pub fn base() -> Self {
        TestBench {
            name: "test bench".into(),
            drivers_dir: None,
            roles: ["attenuator", "dut", "reference"]
                .iter()
                .map(|r| {
                    let value = if *r == "attenuator" {
                        SIM_ATTENUATOR
                    } else {
                        SIM_RANGING
                    };
                    (r.to_string(), value.to_string())
                })
                .collect(),
            range_db: [0.0, 90.0],
            step_db: 1.0,
            tx_power_dbm: 14.0,
            path: "cable_delay_ps = 5200.0\nfixed_loss_db = 7.0".into(),
            reference_k: "delay_ps = 2650.0".into(),
            slots: Vec::new(),
            seed: 3,
            sim_dut: "tx_delay_ps = 1450.0\nrx_delay_ps = [780.0, 1120.0]\n\
                      gain_thresholds_dbm = [-48.0]\nclock_ppm = -14.0\njitter_ps = 350.0\n\
                      outlier_rate = 0.0"
                .into(),
            sim_reference: "delay_ps = 2650.0".into(),
            sim_path: None,
            sim_slots: Vec::new(),
        }
    }

    /// The bench's `[bench] name`.
    pub fn name(mut self, name: &str) -> Self {
        self.name = name.into();
        self
    }

    /// Driver files from the repository's `drivers/` (`[bench] drivers_dir`).
    pub fn shipped_drivers(mut self) -> Self {
        self.drivers_dir = Some(repo("drivers"));
        self
    }

    /// The roles, replacing the base's three: (name, inline table) pairs in order.
    pub fn roles(mut self, roles: &[(&str, &str)]) -> Self {
        self.roles = roles
            .iter()
            .map(|(n, v)| (n.to_string(), v.to_string()))
            .collect();
        self
    }

    /// Role `name` as `value` (an inline table), where it stands, or added last.
    pub fn role(mut self, name: &str, value: &str) -> Self {
        match self.roles.iter_mut().find(|(n, _)| n == name) {
            Some(role) => role.1 = value.into(),
            None => self.roles.push((name.into(), value.into())),
        }
        self
    }

    /// The attenuator's range and step.
    pub fn attenuator(mut self, range_db: [f64; 2], step_db: f64) -> Self {
        self.range_db = range_db;
        self.step_db = step_db;
        self
    }

    /// Both units' transmit power, as declared and as simulated.
    pub fn tx_power_dbm(mut self, dbm: f64) -> Self {
        self.tx_power_dbm = dbm;
        self
    }

    /// The declared `[path]` table's body.
    pub fn path(mut self, body: &str) -> Self {
        self.path = body.into();
        self
    }

    /// How the `[reference]` table declares its K (`delay_ps = …` or `certificate = …`).
    pub fn reference_k(mut self, lines: &str) -> Self {
        self.reference_k = lines.into();
        self
    }

    /// A `[[slot]]`, after those already added.
    pub fn slot(mut self, name: &str, dut: &str, attenuator: &str, channel: u32) -> Self {
        self.slots.push(format!(
            "name = \"{name}\"\ndut = \"{dut}\"\nattenuator = \"{attenuator}\"\nchannel = {channel}"
        ));
        self
    }

    /// The simulation's seed (`[sim] seed`).
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }

    /// The simulated DUT's truth, the `[sim.dut]` table's body.
    pub fn sim_dut(mut self, body: &str) -> Self {
        self.sim_dut = body.into();
        self
    }

    /// The simulated reference's truth, the `[sim.reference]` table's body.
    pub fn sim_reference(mut self, body: &str) -> Self {
        self.sim_reference = body.into();
        self
    }

    /// The true path where it differs from the declared one, a `[sim.path]` body.
    pub fn sim_path(mut self, body: &str) -> Self {
        self.sim_path = Some(body.into());
        self
    }

    /// A `[[sim.slot]]`'s body (with any subtables of its own, `[sim.slot.faults]`), after
    /// those already added.
    pub fn sim_slot(mut self, body: &str) -> Self {
        self.sim_slots.push(body.into());
        self
    }

    /// The bench file's text, `[sim]` last.
    pub fn text(&self) -> String {
        let mut t = format!("[bench]\nname = \"{}\"\n", self.name);
        if let Some(dir) = &self.drivers_dir {
            t += &format!("drivers_dir = {}\n", toml::Value::String(dir.clone()));
        }
        t += "\n[roles]\n";
        for (name, value) in &self.roles {
            t += &format!("{name} = {value}\n");
        }
        let limits = format!(
            "tx_power_dbm = {:?}\nmax_input_dbm = -12.0\nmin_input_dbm = -80.0\n",
            self.tx_power_dbm
        );
        t += &format!(
            "\n[attenuator]\nrange_db = [{:?}, {:?}]\nstep_db = {:?}\n\n[dut]\n{limits}\n\
             [path]\n{}\n\n[reference]\n{}\n{limits}",
            self.range_db[0], self.range_db[1], self.step_db, self.path, self.reference_k
        );
        for slot in &self.slots {
            t += &format!("\n[[slot]]\n{slot}\n");
        }
        t.push_str(&self.sim_text());
        t
    }

    /// The `[sim]` tables alone, as [`TestBench::text`] ends.
    fn sim_text(&self) -> String {
        let mut t = format!(
            "\n[sim]\nseed = {}\ntx_power_dbm = {:?}\n\n[sim.dut]\n{}\n\n[sim.reference]\n{}\n",
            self.seed, self.tx_power_dbm, self.sim_dut, self.sim_reference
        );
        if let Some(path) = &self.sim_path {
            t += &format!("\n[sim.path]\n{path}\n");
        }
        for slot in &self.sim_slots {
            t += &format!("\n[[sim.slot]]\n{slot}\n");
        }
        t
    }

    /// The bench file's text without its `[sim]` tables: the same bench with every role driven
    /// (a bench with no truth cannot serve a `sim:` role).
    pub fn text_without_sim(&self) -> String {
        let text = self.text();
        let cut = text.len() - self.sim_text().len();
        text[..cut].to_string()
    }

    /// The simulated truth, as `taucal` reads it from the file's `[sim]` table.
    pub fn truth(&self) -> SimTruth {
        truth_of(&self.text())
    }

    /// Writes the bench file as `name` in `dir`; its path.
    pub fn write_to(&self, dir: &Path, name: &str) -> PathBuf {
        let path = dir.join(name);
        std::fs::write(&path, self.text()).expect("write the bench file");
        path
    }
}

/// The `[sim]` truth of a bench file's text.
pub fn truth_of(bench: &str) -> SimTruth {
    toml::from_str::<toml::Table>(bench).expect("bench TOML")["sim"]
        .clone()
        .try_into()
        .expect("sim truth")
}

/// A shipped bench (`rel` from the repository root) with each `(from, to)` edit made once, in
/// order; panics where the text no longer holds `from`.
pub fn shipped_with(rel: &str, edits: &[(&str, &str)]) -> String {
    let mut text = std::fs::read_to_string(root().join(rel)).expect("shipped bench");
    for (from, to) in edits {
        assert!(text.contains(from), "{rel} no longer holds {from:?}");
        text = text.replacen(from, to, 1);
    }
    text
}

/// A bench file's text with table `header`'s body (up to the next table) replaced by `body`.
pub fn with_table(bench: &str, header: &str, body: &str) -> String {
    let start = bench
        .find(&format!("{header}\n"))
        .unwrap_or_else(|| panic!("no {header}"));
    let after = start + header.len() + 1;
    let end = bench[after..]
        .find("\n[")
        .map_or(bench.len(), |at| after + at + 1);
    format!("{}{header}\n{body}\n\n{}", &bench[..start], &bench[end..])
}
