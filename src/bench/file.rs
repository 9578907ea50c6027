//! Reading a bench file: raw TOML structs, then a validated [`Bench`].

use super::certificate::ReferenceCertificate;
use super::measured_path::{read_file, MeasuredPath};
use super::uncertainty::{
    input_uncertainty, BenchUncertainty, InputUncertainty, Stated, UncertaintyFrom,
};
use super::{PathFacts, PerGain, TimingFacts};
use crate::diagnostic::{Diagnostic, KeyError, SourceFile};
use crate::instrument::driver_file::{
    DriverFile, DriverKind, KIND_ATTENUATOR, KIND_CHAMBER, KIND_RANGING_CONSOLE,
};
use crate::instrument::template::on_grid;
use crate::instrument::transport::process::find_program;
use crate::instrument::transport::{Address, ADDRESS_FORMS};
use crate::sim::SimTruth;
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::Path;
use std::sync::Arc;

/// The simulated demo bench, compiled in as the default (same text as `recipes/benches/sim-demo.toml`).
pub const BUILT_IN_DEMO: &str = include_str!("../../recipes/benches/sim-demo.toml");

/// Label under which the built-in bench appears in messages and manifests.
pub const BUILT_IN_LABEL: &str = "<built-in sim-demo bench>";

/// Power levels a bench may declare: below −200 dBm nothing is measurable, above +60 dBm (a
/// kilowatt) no bench of this kind transmits; anything outside is a typo.
pub const LEVEL_DBM: std::ops::RangeInclusive<f64> = -200.0..=60.0;

/// True only when `level` is a number no higher than `limit`. Protection asks this question
/// rather than "is it above?", which a NaN would answer no.
fn within(level: f64, limit: f64) -> bool {
    level <= limit
}

/// The roles every bench fills.
pub const ROLES: [&str; 3] = ["attenuator", "dut", "reference"];

/// Roles a bench may fill.
pub const OPTIONAL_ROLES: [&str; 1] = ["chamber"];

/// Drivers available without a driver file: the in-process simulated instruments.
pub const SIM_DRIVERS: [(&str, &str); 3] = [
    ("attenuator", "sim-attenuator"),
    ("dut", "sim-ranging"),
    ("chamber", "sim-chamber"),
];

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawBench {
    bench: RawMeta,
    roles: BTreeMap<String, RoleBinding>,
    attenuator: AttenuatorFacts,
    dut: UnitFacts,
    path: RawPath,
    reference: RawReference,
    timing: Option<TimingFacts>,
    store: Option<StoreFacts>,
    sim: Option<SimTruth>,
    #[serde(default)]
    slot: Vec<super::SlotFacts>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawMeta {
    name: String,
    #[serde(default)]
    description: String,
    drivers_dir: Option<String>,
    station: Option<String>,
}

/// `[path]` as written: [`PathFacts`] with the values' uncertainties.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawPath {
    cable_delay_ps: Option<Stated<f64>>,
    fixed_loss_db: f64,
    atten_delay_ps_per_db: Option<f64>,
    cable_delay_u_ps: Option<f64>,
    atten_delay_u_ps: Option<f64>,
    /// A VNA measurement of the cables and fixtures, instead of `cable_delay_ps`.
    touchstone: Option<String>,
    /// The one-way standard uncertainty of the Touchstone files' group delay (the VNA's).
    touchstone_u_ps: Option<f64>,
    /// The attenuator measured at some of its settings: setting (dB, as text) → file.
    atten_touchstone: Option<BTreeMap<String, String>>,
}

/// `[reference]` as written: [`ReferenceFacts`] with its K's uncertainty.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawReference {
    delay_ps: Option<Stated<PerGain>>,
    delay_u_ps: Option<f64>,
    /// The reference's calibration certificate file, instead of `delay_ps`.
    certificate: Option<String>,
    tx_power_dbm: f64,
    max_input_dbm: f64,
    min_input_dbm: f64,
}

/// `[store]`: where this bench's runs are recorded.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StoreFacts {
    /// A results store URL (`sqlite:PATH`, relative to the bench's folder, or `postgres://…`).
    pub url: String,
}

/// Where driver files are looked for, relative to the bench file's folder, unless the bench
/// says otherwise with `[bench] drivers_dir` (benches live in `recipes/benches/`, drivers in
/// `drivers/`).
pub const DEFAULT_DRIVERS_DIR: &str = "../../drivers";

/// Which driver plays a role, and where to reach it.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RoleBinding {
    /// Driver name (`sim-attenuator`, `sim-ranging`, or a driver file's name).
    pub driver: String,
    /// Address: `sim:` for the in-process simulated bench, `tcp:HOST:PORT`, `serial:PATH?baud=N`.
    pub address: String,
    /// Reply timeout for this bench, replacing the driver file's `link.timeout_ms` (a slow
    /// network, or a quick one where faults should cost little).
    #[serde(default)]
    pub timeout_ms: Option<f64>,
}

/// What the bench knows of its step attenuator.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AttenuatorFacts {
    /// Lowest and highest setting, dB.
    pub range_db: [f64; 2],
    /// Smallest step; settings must be multiples of it.
    pub step_db: f64,
}

/// Receive-level facts of a radio unit.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct UnitFacts {
    /// Nominal transmit power at the antenna port.
    pub tx_power_dbm: f64,
    /// Highest receive level allowed at the port (damage or saturation limit, with margin).
    pub max_input_dbm: f64,
    /// Lowest receive level worth measuring (near sensitivity).
    pub min_input_dbm: f64,
    /// The K a range-reporting DUT removes before it reports (its factory calibration), when
    /// neither the device nor its driver says.
    #[serde(default)]
    pub applied_k_ps: Option<f64>,
}

/// The reference unit: its calibrated K, and its level facts.
#[derive(Debug, Clone, PartialEq)]
pub struct ReferenceFacts {
    /// The reference's K as calibrated (constant, or per its reported gain index).
    pub delay_ps: PerGain,
    /// Nominal transmit power at the antenna port.
    pub tx_power_dbm: f64,
    /// Highest receive level allowed at the port.
    pub max_input_dbm: f64,
    /// Lowest receive level worth measuring.
    pub min_input_dbm: f64,
    /// The certificate `delay_ps` came from, when the bench names one (`[reference]
    /// certificate`).
    pub certificate: Option<ReferenceCertificate>,
}

/// A validated bench.
#[derive(Debug, Clone)]
pub struct Bench {
    /// The file it came from (kept for error messages and hashing).
    pub source: SourceFile,
    /// Bench name.
    pub name: String,
    /// Free text.
    pub description: String,
    /// Role → driver and address.
    pub roles: BTreeMap<String, RoleBinding>,
    /// The attenuator's range and step.
    pub attenuator: AttenuatorFacts,
    /// The DUT's level facts.
    pub dut: UnitFacts,
    /// Cable and fixture delays and losses. With a measured path (`measured_path`), its
    /// `cable_delay_ps` is 0 and `atten_delay_ps_per_db` too when the attenuator is measured:
    /// the delays are per channel, in `measured_path`.
    pub path: PathFacts,
    /// The path as a VNA measured it (`[path] touchstone`), per channel.
    pub measured_path: Option<Arc<MeasuredPath>>,
    /// The reference unit.
    pub reference: ReferenceFacts,
    /// Standard uncertainties of the path's delays and the reference's K (GUM type B).
    pub uncertainty: BenchUncertainty,
    /// How long actions take on a real bench (for estimates only); `None` when the file has no
    /// `[timing]`, and the defaults apply.
    pub timing: Option<TimingFacts>,
    /// Simulation truth, present on a simulated bench.
    pub sim: Option<SimTruth>,
    /// Folder of driver files, as the bench file gives it (relative to the bench's folder).
    pub drivers_dir: String,
    /// The station's name (`[bench] station`), for the results store.
    pub station: Option<String>,
    /// Where its runs are recorded (`[store]`).
    pub store: Option<StoreFacts>,
    /// Driver files of the roles not served in-process, by role.
    pub drivers: BTreeMap<String, DriverFile>,
    /// DUT slots (`[[slot]]`); empty on a one-DUT bench.
    pub slots: Vec<super::SlotFacts>,
    /// The slot this bench was narrowed to ([`Bench::for_slot`]), if any.
    pub slot: Option<super::SlotOf>,
}

impl Bench {
    /// Reads and validates a bench file.
    pub fn load(path: &Path) -> Result<Bench, Diagnostic> {
        let text = crate::text_file::read(path).map_err(|e| {
            Diagnostic::in_file(path, format!("cannot read bench file: {e}"))
                .with_hint("give the path of a bench TOML file, e.g. recipes/benches/sim-demo.toml")
        })?;
        Bench::parse(SourceFile::new(path, text))
    }

    /// The compiled-in simulated demo bench.
    pub fn built_in() -> Result<Bench, Diagnostic> {
        Bench::parse(SourceFile::new(BUILT_IN_LABEL, BUILT_IN_DEMO))
    }

    /// Parses and validates bench text.
    pub fn parse(source: SourceFile) -> Result<Bench, Diagnostic> {
        let raw: RawBench = crate::toml_input::parse(&source)?;
        let folder = source.path.parent().unwrap_or(Path::new(".")).to_path_buf();
        let measured_path = measured_path(&raw.path, &folder).map_err(|e| source.key_error(e))?;
        let certificate = match &raw.reference.certificate {
            Some(name) => Some(reference_certificate(
                &raw.reference,
                &folder,
                name,
                &source,
            )?),
            None => None,
        };
        let mut uncertainty = stated_uncertainty(&raw.path, &raw.reference)
            .map_err(|e| source.key_error(KeyError::new(e.key, e.problem, e.hint)))?;
        if let Some(c) = &certificate {
            uncertainty.reference = Some(c.uncertainty);
        }
        uncertainty.measured = measured_path.clone();
        if measured_path.is_some() {
            uncertainty.cable = raw.path.touchstone_u_ps.map(stated_u);
            if measured_path.as_ref().is_some_and(|m| !m.atten.is_empty()) {
                uncertainty.atten = uncertainty.cable;
            }
        }
        let reference_k = match (&certificate, &raw.reference.delay_ps) {
            (Some(c), _) => c.k_ps.clone(),
            (None, Some(d)) => d.value(),
            (None, None) => return Err(source.key_error(KeyError::new(
                "reference",
                "states no K for the reference unit",
                "give delay_ps (the reference's calibrated K in ps) or certificate = \"FILE.toml\"",
            ))),
        };
        let bench = Bench {
            name: raw.bench.name,
            description: raw.bench.description,
            roles: raw.roles,
            attenuator: raw.attenuator,
            dut: raw.dut,
            path: PathFacts {
                cable_delay_ps: raw.path.cable_delay_ps.as_ref().map_or(0.0, Stated::value),
                fixed_loss_db: raw.path.fixed_loss_db,
                atten_delay_ps_per_db: raw.path.atten_delay_ps_per_db.unwrap_or(0.0),
            },
            measured_path,
            reference: ReferenceFacts {
                delay_ps: reference_k,
                tx_power_dbm: raw.reference.tx_power_dbm,
                max_input_dbm: raw.reference.max_input_dbm,
                min_input_dbm: raw.reference.min_input_dbm,
                certificate,
            },
            uncertainty,
            timing: raw.timing,
            sim: raw.sim,
            drivers_dir: raw
                .bench
                .drivers_dir
                .unwrap_or_else(|| DEFAULT_DRIVERS_DIR.to_string()),
            drivers: BTreeMap::new(),
            station: raw.bench.station,
            store: raw.store,
            slots: raw.slot,
            slot: None,
            source,
        };
        bench.checked()
    }

    fn checked(mut self) -> Result<Bench, Diagnostic> {
        self.validate().map_err(|e| self.source.key_error(e))?;
        self.drivers = self.load_drivers()?;
        self.validate_slots()
            .map_err(|e| self.source.key_error(e))?;
        Ok(self)
    }

    /// The bench with role addresses replaced (`--connect ROLE=ADDRESS`), checked again.
    pub fn reconnect(&self, overrides: &[String]) -> Result<Bench, Diagnostic> {
        let mut bench = self.clone();
        for text in overrides {
            let hint = "write ROLE=ADDRESS, e.g. --connect attenuator=tcp:127.0.0.1:5025";
            let Some((role, address)) = text.split_once('=') else {
                return Err(
                    Diagnostic::plain(format!("--connect {text}: not ROLE=ADDRESS"))
                        .with_hint(hint),
                );
            };
            let Some(binding) = bench.roles.get_mut(role) else {
                return Err(Diagnostic::plain(format!(
                    "--connect {text}: the bench has no role `{role}`"
                ))
                .with_hint(format!("roles are {}", ROLES.join(", "))));
            };
            binding.address = address.to_string();
        }
        bench.checked().map_err(|mut d| {
            d.message = format!("with --connect {}: {}", overrides.join(" "), d.message);
            d
        })
    }

    /// The measured path's delays on each of `channels` (center, bandwidth, MHz); empty when
    /// the path is given as numbers. An error names the file's key when a channel's band is
    /// not inside its file.
    pub fn channel_paths(
        &self,
        channels: &[(u32, u32)],
    ) -> Result<Vec<super::measured_path::OnChannel>, Diagnostic> {
        let Some(m) = &self.measured_path else {
            return Ok(Vec::new());
        };
        channels
            .iter()
            .map(|&(c, b)| {
                m.channel(c, b)
                    .map(|p| ((c, b), p))
                    .map_err(|e| self.source.key_error(e))
            })
            .collect()
    }

    /// The folder driver files are read from.
    pub fn drivers_path(&self) -> std::path::PathBuf {
        let folder = self.source.path.parent().unwrap_or(Path::new("."));
        folder.join(&self.drivers_dir)
    }

    /// Loads the driver file of every role not served in-process and checks it fits the role and
    /// the bench's limits.
    fn load_drivers(&self) -> Result<BTreeMap<String, DriverFile>, Diagnostic> {
        let mut drivers = BTreeMap::new();
        for (role, binding) in &self.roles {
            if binding.address.starts_with("sim:") {
                continue;
            }
            let driver = DriverFile::load(&self.drivers_path(), &binding.driver)?;
            self.fits(role, &driver)
                .map_err(|e| self.source.key_error(e))?;
            drivers.insert(role.clone(), driver);
        }
        Ok(drivers)
    }

    fn fits(&self, role: &str, driver: &DriverFile) -> Result<(), KeyError> {
        let key = format!("roles.{role}.driver");
        let wanted = match self.role_kind(role) {
            "attenuator" => KIND_ATTENUATOR,
            "chamber" => KIND_CHAMBER,
            _ => KIND_RANGING_CONSOLE,
        };
        match &driver.kind {
            kind if kind.name() != wanted => Err(KeyError::new(
                key,
                format!("`{}` drives a {}, not the {role}", driver.name, kind.name()),
                format!("name a driver file of kind {wanted}"),
            )),
            DriverKind::Attenuator(a) => {
                let [lo, hi] = self.attenuator.range_db;
                if lo < a.range_db[0] || hi > a.range_db[1] {
                    return Err(KeyError::new(
                        "attenuator.range_db",
                        format!(
                            "[{lo}, {hi}] is wider than driver `{}` allows ({:?})",
                            driver.name, a.range_db
                        ),
                        "keep the bench's range within the driver's",
                    ));
                }
                if !on_grid(self.attenuator.step_db, 0.0, a.step_db) {
                    return Err(KeyError::new(
                        "attenuator.step_db",
                        format!(
                            "{} dB is not a multiple of driver `{}`'s step {} dB",
                            self.attenuator.step_db, driver.name, a.step_db
                        ),
                        "use a multiple of the driver's step",
                    ));
                }
                if let Some((exposed, _)) = self.exposes_receivers(a.safe_atten_db) {
                    return Err(KeyError::new(
                        key,
                        format!(
                            "`{}`'s safe state leaves the receivers exposed: {exposed}",
                            driver.name
                        ),
                        format!(
                            "a safe state must protect both receivers: set the driver's \
                             [safe_state] atten_db to at least {:.2} dB, or leave it out \
                             (maximum attenuation)",
                            self.min_safe_atten_db()
                        ),
                    ));
                }
                let into = self.dut.tx_power_dbm.max(self.reference.tx_power_dbm);
                if !within(into, a.max_input_dbm) {
                    return Err(KeyError::new(
                        "attenuator",
                        format!("can receive {into} dBm, above driver `{}`'s max_input_dbm {} dBm", driver.name, a.max_input_dbm),
                        "RF power above an attenuator's rating damages it: add fixed attenuation before it or lower tx_power_dbm",
                    ));
                }
                Ok(())
            }
            DriverKind::RangingConsole(c) => {
                let limit = if self.role_kind(role) == "dut" {
                    self.dut.max_input_dbm
                } else {
                    self.reference.max_input_dbm
                };
                if !within(limit, c.max_input_dbm) {
                    return Err(KeyError::new(
                        format!("{role}.max_input_dbm"),
                        format!(
                            "{limit} dBm is above driver `{}`'s max_input_dbm {} dBm",
                            driver.name, c.max_input_dbm
                        ),
                        "the bench's limit must not exceed the device's rating",
                    ));
                }
                if c.range_unit.is_some()
                    && !c.learns_applied_k()
                    && self.dut.applied_k_ps.is_none()
                {
                    return Err(KeyError::new(
                        key,
                        format!(
                            "`{}` reads distances, but neither the driver nor the bench says \
                             which K the device removed from them, so they cannot give its K",
                            driver.name
                        ),
                        "declare the device's factory K as applied_k_ps under [dut] in the bench \
                         (or in the driver's [reports]), or capture the device's own \
                         (?P<applied_k>…) in the driver's reply.exchange",
                    ));
                }
                Ok(())
            }
            // Its rated setpoint range is checked against every soak when a recipe is checked
            // with the bench, and again before each setpoint is sent.
            DriverKind::Chamber(_) => Ok(()),
        }
    }

    /// True when every role is served by the in-process simulated bench.
    pub fn is_simulated(&self) -> bool {
        self.roles.values().all(|r| r.address.starts_with("sim:"))
    }

    /// The K a range-reporting DUT removes before reporting, as the bench declares it
    /// (`[dut] applied_k_ps`). A K the device reports itself takes precedence (the run records
    /// it in its manifest).
    pub fn applied_k_ps(&self) -> Option<f64> {
        self.dut.applied_k_ps
    }

    /// Receive level at the DUT with the attenuator at `atten_db`.
    pub fn dut_rx_dbm(&self, atten_db: f64) -> f64 {
        self.reference.tx_power_dbm - self.path.fixed_loss_db - atten_db
    }

    /// Receive level at the reference with the attenuator at `atten_db`.
    pub fn reference_rx_dbm(&self, atten_db: f64) -> f64 {
        self.dut.tx_power_dbm - self.path.fixed_loss_db - atten_db
    }

    /// The lowest attenuation at which neither receiver gets more than its `max_input_dbm`,
    /// each receiving the other unit's transmit power. NaN when any input is not finite, which
    /// every caller must treat as "no setting is safe".
    pub fn min_safe_atten_db(&self) -> f64 {
        let loss = self.path.fixed_loss_db;
        let into_dut = self.reference.tx_power_dbm - loss - self.dut.max_input_dbm;
        let into_reference = self.dut.tx_power_dbm - loss - self.reference.max_input_dbm;
        // f64::max would drop a NaN and keep the other side: protection must not.
        if into_dut.is_finite() && into_reference.is_finite() {
            into_dut.max(into_reference)
        } else {
            f64::NAN
        }
    }

    /// The attenuation range in which both receivers stay between their minimum and maximum
    /// input levels and the attenuator can go, snapped inward to its step grid. `None` when
    /// there is none, or when any level it depends on is not finite.
    pub fn usable_atten_db(&self) -> Option<(f64, f64)> {
        let loss = self.path.fixed_loss_db;
        let lowest = [self.attenuator.range_db[0], self.min_safe_atten_db()];
        let highest = [
            self.attenuator.range_db[1],
            self.reference.tx_power_dbm - loss - self.dut.min_input_dbm,
            self.dut.tx_power_dbm - loss - self.reference.min_input_dbm,
        ];
        // f64::max and min drop a NaN: look at every term first.
        if !lowest.iter().chain(&highest).all(|v| v.is_finite()) {
            return None;
        }
        let lo = lowest.into_iter().fold(f64::MIN, f64::max);
        let hi = highest.into_iter().fold(f64::MAX, f64::min);
        let step = self.attenuator.step_db;
        let (lo, hi) = ((lo / step).ceil() * step, (hi / step).floor() * step);
        (lo <= hi).then_some((lo, hi))
    }

    /// Why `atten_db` may not be set on this bench, if it may not: outside the attenuator's
    /// range or grid, or a receive level above a receiver's maximum input.
    pub fn refuse_atten(&self, atten_db: f64) -> Option<(String, String)> {
        let [lo, hi] = self.attenuator.range_db;
        if !(atten_db.is_finite() && atten_db >= lo - 1e-9 && atten_db <= hi + 1e-9) {
            return Some((
                format!("{atten_db} dB is outside the attenuator's range {lo}..{hi} dB"),
                format!("choose settings between {lo} and {hi} dB"),
            ));
        }
        if !on_grid(atten_db, 0.0, self.attenuator.step_db) {
            return Some((
                format!(
                    "{atten_db} dB is not on the attenuator's {} dB grid",
                    self.attenuator.step_db
                ),
                format!("use multiples of {} dB", self.attenuator.step_db),
            ));
        }
        self.exposes_receivers(atten_db)
    }

    /// Why `atten_db` would put more than a receiver's `max_input_dbm` into it, if it would.
    /// Written so that any non-finite level is refused: every comparison asks "is it safe?",
    /// which NaN answers no.
    pub fn exposes_receivers(&self, atten_db: f64) -> Option<(String, String)> {
        let keep = |min_db: f64| {
            format!(
                "RF power above a receiver's limit can destroy it: keep attenuation at or above \
                 {min_db:.2} dB"
            )
        };
        let min_safe_db = self.min_safe_atten_db();
        if !min_safe_db.is_finite() {
            return Some((
                format!(
                    "{atten_db} dB cannot be judged safe: the bench's transmit powers, fixed loss \
                     or input limits are not all finite numbers"
                ),
                "give every power, loss and limit as a finite number".to_string(),
            ));
        }
        let dut = self.dut_rx_dbm(atten_db);
        if !within(dut, self.dut.max_input_dbm) {
            return Some((
                format!(
                    "{atten_db} dB puts {dut:.2} dBm into the DUT, above its max_input_dbm {:.2} dBm",
                    self.dut.max_input_dbm
                ),
                keep(min_safe_db),
            ));
        }
        let reference = self.reference_rx_dbm(atten_db);
        if !within(reference, self.reference.max_input_dbm) {
            return Some((
                format!(
                    "{atten_db} dB puts {reference:.2} dBm into the reference unit, above its max_input_dbm {:.2} dBm",
                    self.reference.max_input_dbm
                ),
                keep(min_safe_db),
            ));
        }
        None
    }

    fn validate(&self) -> Result<(), KeyError> {
        let slot_roles = self.roles.keys().map(String::as_str).filter(|r| {
            !ROLES.contains(r) && !OPTIONAL_ROLES.contains(r) && self.role_kind(r) != *r
        });
        let names: Vec<&str> = ROLES
            .iter()
            .chain(&OPTIONAL_ROLES)
            .copied()
            .chain(slot_roles)
            .collect();
        for role in &names {
            let Some(binding) = self.roles.get(*role) else {
                // A slotted bench binds its DUTs and attenuators under roles its slots name.
                if OPTIONAL_ROLES.contains(role) || (self.is_slotted() && *role != "reference") {
                    continue;
                }
                return Err(KeyError::new(
                    "roles",
                    format!("has no `{role}` role"),
                    format!("add `{role} = {{ driver = \"…\", address = \"…\" }}` under [roles]"),
                ));
            };
            if let Some(t) = binding.timeout_ms {
                if !(t.is_finite() && (1.0..=600_000.0).contains(&t)) {
                    return Err(KeyError::new(
                        format!("roles.{role}.timeout_ms"),
                        format!("{t} ms is not a usable timeout"),
                        "give 1 to 600000 ms, or leave it out to use the driver file's",
                    ));
                }
            }
            if binding.address.starts_with("sim:") {
                if binding.timeout_ms.is_some() {
                    return Err(KeyError::new(
                        format!("roles.{role}.timeout_ms"),
                        "applies to an instrument reached over a link, not to `sim:`",
                        "leave it out, or give the role a driver file and an address",
                    ));
                }
                let kind = self.role_kind(role);
                let expected = SIM_DRIVERS
                    .iter()
                    .find(|(r, _)| *r == kind)
                    .map_or("sim-ranging", |(_, d)| d);
                if binding.driver != expected {
                    return Err(KeyError::new(
                        format!("roles.{role}.driver"),
                        format!("`{}` cannot serve the simulated {role}", binding.driver),
                        format!("on address `sim:` the {role} is driven by `{expected}`"),
                    ));
                }
            } else {
                let address = Address::parse(&binding.address).map_err(|e| {
                    KeyError::new(
                        format!("roles.{role}.address"),
                        format!("is not an address: {}", e.explained()),
                        format!("addresses are {ADDRESS_FORMS}"),
                    )
                })?;
                if let Address::Exec(words) = &address {
                    let program = &words[0];
                    if find_program(program).is_none() {
                        return Err(KeyError::new(
                            format!("roles.{role}.address"),
                            format!(
                                "names the program `{program}`, which is not {}",
                                if program.contains('/') {
                                    "an executable file"
                                } else {
                                    "an executable on PATH"
                                }
                            ),
                            "give the program's path (relative ones are from the directory \
                             taucal runs in), or install it",
                        ));
                    }
                }
                if SIM_DRIVERS.iter().any(|(_, d)| *d == binding.driver) {
                    return Err(KeyError::new(
                        format!("roles.{role}.driver"),
                        format!(
                            "`{}` drives only the in-process simulated bench (`sim:`)",
                            binding.driver
                        ),
                        format!(
                            "name a driver file from the drivers folder for `{}`",
                            binding.address
                        ),
                    ));
                }
            }
        }
        if let Some(extra) = self.roles.keys().find(|r| !names.contains(&r.as_str())) {
            return Err(KeyError::new(
                format!("roles.{extra}"),
                "is not a role taucal knows",
                if self.is_slotted() {
                    "on a slotted bench a role is `reference`, or a DUT or attenuator a                      [[slot]] names (dut = …, attenuator = …)"
                        .to_string()
                } else {
                    format!(
                        "roles are {} (and optionally {})",
                        ROLES.join(", "),
                        OPTIONAL_ROLES.join(", ")
                    )
                },
            ));
        }
        if self
            .roles
            .get("chamber")
            .is_some_and(|r| r.address.starts_with("sim:"))
            && self.sim.as_ref().is_some_and(|s| s.chamber.is_none())
        {
            return Err(KeyError::new(
                "roles.chamber",
                "is simulated but [sim.chamber] is missing",
                "add [sim.chamber] (start_c, ramp_c_per_min, dut_tau_s), or remove the chamber role",
            ));
        }
        let any_sim = self.roles.iter().any(|(r, b)| {
            ["attenuator", "dut"].contains(&self.role_kind(r)) && b.address.starts_with("sim:")
        });
        if any_sim && self.sim.is_none() {
            return Err(KeyError::new(
                "roles",
                "use simulated instruments but the file has no [sim] table",
                "add [sim], [sim.dut] and [sim.reference] with the simulation's truth",
            ));
        }
        let [lo, hi] = self.attenuator.range_db;
        if !(lo.is_finite() && hi.is_finite() && lo >= 0.0 && lo < hi) {
            return Err(KeyError::new(
                "attenuator.range_db",
                format!("[{lo}, {hi}] is not a range"),
                "give [lowest, highest] in dB, lowest ≥ 0, e.g. [0.0, 95.0]",
            ));
        }
        if !(self.attenuator.step_db > 0.0 && self.attenuator.step_db <= hi - lo) {
            return Err(KeyError::new(
                "attenuator.step_db",
                format!("{} dB is not a usable step", self.attenuator.step_db),
                "give the attenuator's smallest step, e.g. 0.25 or 1.0",
            ));
        }
        for (key, v) in [
            ("path.cable_delay_ps", self.path.cable_delay_ps),
            ("path.fixed_loss_db", self.path.fixed_loss_db),
            (
                "path.atten_delay_ps_per_db",
                self.path.atten_delay_ps_per_db,
            ),
        ] {
            if !(v.is_finite() && v >= 0.0) {
                return Err(KeyError::new(
                    key,
                    format!("{v} is negative or not finite"),
                    "use a value ≥ 0",
                ));
            }
        }
        if self
            .reference
            .delay_ps
            .values()
            .iter()
            .any(|v| !v.is_finite())
        {
            return Err(KeyError::new(
                "reference.delay_ps",
                "is not finite",
                "give the calibrated K in ps",
            ));
        }
        for (unit, f) in [("dut", &self.dut), ("reference", &self.reference_levels())] {
            for (key, v) in [
                ("tx_power_dbm", f.tx_power_dbm),
                ("max_input_dbm", f.max_input_dbm),
                ("min_input_dbm", f.min_input_dbm),
            ] {
                if !(v.is_finite() && LEVEL_DBM.contains(&v)) {
                    return Err(KeyError::new(
                        format!("{unit}.{key}"),
                        format!("{v} dBm is not a power level a bench can have"),
                        format!(
                            "give a finite level from {} to {} dBm; receiver protection is \
                             computed from it",
                            LEVEL_DBM.start(),
                            LEVEL_DBM.end()
                        ),
                    ));
                }
            }
            if f.min_input_dbm >= f.max_input_dbm {
                return Err(KeyError::new(
                    format!("{unit}.min_input_dbm"),
                    format!(
                        "{} dBm is not below max_input_dbm {} dBm",
                        f.min_input_dbm, f.max_input_dbm
                    ),
                    "the usable receive window runs from min_input_dbm up to max_input_dbm",
                ));
            }
        }
        if self.usable_atten_db().is_none() {
            return Err(KeyError::new(
                "attenuator.range_db",
                "leaves no setting where both receivers are within their input limits",
                "check tx_power_dbm, path.fixed_loss_db and the input limits",
            ));
        }
        if let Some(timing) = &self.timing {
            timing.validate()?;
        }
        if let Some(sim) = &self.sim {
            sim.validate()?;
            // The simulator's path is one number for every channel; a measured declaration
            // gives none, so the truth must be said.
            if self.measured_path.is_some() && sim.path.is_none() {
                return Err(KeyError::new(
                    "sim",
                    "has no [sim.path], but the bench's path is a Touchstone file",
                    "give the simulated path's true one-way delay: [sim.path] cable_delay_ps = … \
                     (the file's delay to rehearse an agreeing declaration, another to rehearse \
                     a wrong one)",
                ));
            }
        }
        Ok(())
    }

    fn reference_levels(&self) -> UnitFacts {
        UnitFacts {
            tx_power_dbm: self.reference.tx_power_dbm,
            max_input_dbm: self.reference.max_input_dbm,
            min_input_dbm: self.reference.min_input_dbm,
            applied_k_ps: None,
        }
    }
}

/// A standard uncertainty stated directly, with infinite degrees of freedom.
fn stated_u(u_ps: f64) -> InputUncertainty {
    InputUncertainty {
        u_ps,
        dof: f64::INFINITY,
        from: UncertaintyFrom::Standard,
    }
}

/// `[path] touchstone` and `atten_touchstone` read from the bench's `folder`, with the keys
/// they exclude refused; `None` when the path is given as numbers.
fn measured_path(path: &RawPath, folder: &Path) -> Result<Option<Arc<MeasuredPath>>, KeyError> {
    let Some(name) = &path.touchstone else {
        if path.cable_delay_ps.is_none() {
            return Err(KeyError::new(
                "path",
                "states no cable delay",
                "give cable_delay_ps (one-way, ps) or touchstone = \"FILE.s2p\" (a VNA measurement)",
            ));
        }
        for (key, given) in [
            ("path.touchstone_u_ps", path.touchstone_u_ps.is_some()),
            ("path.atten_touchstone", path.atten_touchstone.is_some()),
        ] {
            if given {
                return Err(KeyError::new(
                    key,
                    "is given without path.touchstone",
                    "measure the cables too and name the file with touchstone = \"FILE.s2p\", or remove this key",
                ));
            }
        }
        return Ok(None);
    };
    let refuse = |key: &str, instead: &str| {
        KeyError::new(
            key,
            "is given as well as path.touchstone",
            format!("the path's delay comes from one source: remove {key}{instead}"),
        )
    };
    if path.cable_delay_ps.is_some() {
        return Err(refuse(
            "path.cable_delay_ps",
            ", or touchstone to use the number",
        ));
    }
    if path.cable_delay_u_ps.is_some() {
        return Err(refuse(
            "path.cable_delay_u_ps",
            "; the file's uncertainty is touchstone_u_ps",
        ));
    }
    if let Some(u) = path.touchstone_u_ps {
        if !(u.is_finite() && u >= 0.0) {
            return Err(KeyError::new(
                "path.touchstone_u_ps",
                format!("{u} is negative or not finite"),
                "give the one-way standard uncertainty of the measured group delay in ps, ≥ 0",
            ));
        }
    }
    let cable = read_file(folder, "path.touchstone", name)?;
    let mut atten = Vec::new();
    if let Some(files) = &path.atten_touchstone {
        for key in ["path.atten_delay_ps_per_db", "path.atten_delay_u_ps"] {
            let given = match key {
                "path.atten_delay_ps_per_db" => path.atten_delay_ps_per_db.is_some(),
                _ => path.atten_delay_u_ps.is_some(),
            };
            if given {
                return Err(KeyError::new(
                    key,
                    "is given as well as path.atten_touchstone",
                    format!("the attenuator's delay comes from its files: remove {key}"),
                ));
            }
        }
        if files.is_empty() {
            return Err(KeyError::new(
                "path.atten_touchstone",
                "names no file",
                "map settings to files, e.g. { \"0\" = \"att-0db.s2p\", \"30\" = \"att-30db.s2p\" }",
            ));
        }
        for (setting, file) in files {
            let key = format!("path.atten_touchstone.{setting}");
            let db = setting
                .trim()
                .parse::<f64>()
                .ok()
                .filter(|d| d.is_finite() && *d >= 0.0)
                .ok_or_else(|| {
                    KeyError::new(
                        key.clone(),
                        format!("`{setting}` is not an attenuator setting in dB"),
                        "key each file by its setting in dB, e.g. \"30\" = \"att-30db.s2p\"",
                    )
                })?;
            atten.push((db, read_file(folder, &key, file)?));
        }
    }
    Ok(Some(Arc::new(MeasuredPath::new(cable, atten))))
}

/// `[reference] certificate` read from the bench's `folder`, refusing the keys it replaces.
fn reference_certificate(
    reference: &RawReference,
    folder: &Path,
    name: &str,
    bench: &SourceFile,
) -> Result<ReferenceCertificate, Diagnostic> {
    for (key, given) in [
        ("reference.delay_ps", reference.delay_ps.is_some()),
        ("reference.delay_u_ps", reference.delay_u_ps.is_some()),
    ] {
        if given {
            return Err(bench.key_error(KeyError::new(
                key,
                "is given as well as reference.certificate",
                format!(
                    "the reference's K and its uncertainty come from the certificate: remove {key}"
                ),
            )));
        }
    }
    let path = folder.join(name);
    if !path.is_file() {
        return Err(bench.key_error(KeyError::new(
            "reference.certificate",
            format!("names `{}`, which is not a file", path.display()),
            "name the reference's certificate file (TOML), relative to the bench file's folder",
        )));
    }
    super::certificate::load(&path)
}

/// The uncertainties `[path]` and `[reference]` state. The attenuator's is one standard
/// uncertainty of its added delay at any setting used (a slope's uncertainty would need the
/// settings each cell was measured at, which the table does not keep).
fn stated_uncertainty(
    path: &RawPath,
    reference: &RawReference,
) -> Result<BenchUncertainty, super::uncertainty::BadStatement> {
    let plain = Stated::Plain(PerGain::Same(0.0));
    Ok(BenchUncertainty {
        cable: match &path.cable_delay_ps {
            Some(c) => input_uncertainty(
                c,
                path.cable_delay_u_ps,
                "path.cable_delay_ps",
                "path.cable_delay_u_ps",
            )?,
            None => None,
        },
        atten: input_uncertainty(
            &Stated::Plain(path.atten_delay_ps_per_db.unwrap_or(0.0)),
            path.atten_delay_u_ps,
            "path.atten_delay_ps_per_db",
            "path.atten_delay_u_ps",
        )?,
        reference: input_uncertainty(
            reference.delay_ps.as_ref().unwrap_or(&plain),
            reference.delay_u_ps,
            "reference.delay_ps",
            "reference.delay_u_ps",
        )?,
        measured: None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn demo() -> Bench {
        Bench::built_in().expect("demo bench")
    }

    #[test]
    fn a_certificate_gives_the_value_and_its_uncertainty() {
        let text = BUILT_IN_DEMO
            .replacen(
                "delay_ps = 2800.0 ",
                "delay_ps = { value_ps = [2800.0, 2950.0], expanded_ps = 6.0, k = 3.0, dof = 9 } ",
                1,
            )
            .replacen(
                "cable_delay_ps = 6100.0",
                "cable_delay_ps = 6100.0\ncable_delay_u_ps = 1.5",
                1,
            );
        let bench = Bench::parse(SourceFile::new("b.toml", text)).expect("bench parses");
        assert_eq!(
            bench.reference.delay_ps,
            PerGain::Each(vec![2800.0, 2950.0])
        );
        assert_eq!(bench.path.cable_delay_ps, 6100.0);
        let u = bench.uncertainty;
        assert_eq!(u.reference.map(|r| (r.u_ps, r.dof)), Some((2.0, 9.0)));
        assert_eq!(u.cable.map(|c| (c.u_ps, c.dof)), Some((1.5, f64::INFINITY)));
        assert_eq!(u.atten, None);
        assert_eq!(demo().uncertainty, super::BenchUncertainty::default());
    }

    /// Every setting of the demo attenuator's grid, 0 to 95 dB in 0.25 dB.
    fn every_setting() -> impl Iterator<Item = f64> {
        (0..=380).map(|k| f64::from(k) * 0.25)
    }

    #[test]
    fn the_demo_limit_is_17_db_exactly() {
        // 15 dBm − 8 dB − A ≤ −10 dBm ⇔ A ≥ 17 dB, for both receivers (README, "Bench files").
        let b = demo();
        assert_eq!(b.min_safe_atten_db(), 17.0);
        let (why, _) = b.refuse_atten(16.75).expect("refused");
        assert!(why.contains("puts -9.75 dBm into the DUT"), "{why}");
        assert_eq!(b.refuse_atten(17.0), None);
        assert_eq!(b.usable_atten_db(), Some((17.0, 89.0)));
    }

    #[test]
    fn a_non_finite_level_anywhere_in_the_computation_refuses_every_setting() {
        // A bench built in code skips the file checks: protection must hold on its own.
        type Spoiler = (&'static str, fn(&mut Bench));
        let spoilers: [Spoiler; 7] = [
            ("dut.max_input_dbm", |b| b.dut.max_input_dbm = f64::NAN),
            ("reference.max_input_dbm", |b| {
                b.reference.max_input_dbm = f64::NAN
            }),
            ("dut.tx_power_dbm", |b| b.dut.tx_power_dbm = f64::NAN),
            ("reference.tx_power_dbm", |b| {
                b.reference.tx_power_dbm = f64::INFINITY
            }),
            ("path.fixed_loss_db", |b| b.path.fixed_loss_db = f64::NAN),
            ("dut.min_input_dbm", |b| b.dut.min_input_dbm = f64::NAN),
            ("dut.max_input_dbm = inf", |b| {
                b.dut.max_input_dbm = f64::INFINITY
            }),
        ];
        for (what, spoil) in spoilers {
            let mut b = demo();
            spoil(&mut b);
            assert_eq!(b.usable_atten_db(), None, "{what}");
            if what != "dut.min_input_dbm" {
                for a in every_setting() {
                    assert!(b.refuse_atten(a).is_some(), "{what}: {a} dB allowed");
                }
            }
        }
        assert!(demo().refuse_atten(f64::NAN).is_some());
    }

    #[test]
    fn the_file_checks_refuse_non_finite_and_impossible_levels() {
        for (from, to, key) in [
            (
                "max_input_dbm = -10.0",
                "max_input_dbm = nan",
                "dut.max_input_dbm",
            ),
            (
                "tx_power_dbm = 15.0",
                "tx_power_dbm = inf",
                "dut.tx_power_dbm",
            ),
            (
                "min_input_dbm = -82.0",
                "min_input_dbm = -1e9",
                "dut.min_input_dbm",
            ),
        ] {
            let text = BUILT_IN_DEMO.replacen(from, to, 1);
            let e = Bench::parse(SourceFile::new("b.toml", text)).expect_err(to);
            assert!(e.message.contains(key), "{to}: {}", e.message);
        }
    }

    /// The demo bench with its attenuator driven by the first attenuator driver file shipped
    /// in `drivers/`, its `[safe_state]` replaced by `safe_state`.
    fn driven_bench(safe_state: &str) -> Result<Bench, Diagnostic> {
        let shipped = Path::new(env!("CARGO_MANIFEST_DIR")).join("drivers");
        let mut files: Vec<_> = std::fs::read_dir(&shipped)
            .expect("drivers folder")
            .map(|e| e.expect("entry").path())
            .collect();
        files.sort();
        let driver = files
            .iter()
            .map(|p| std::fs::read_to_string(p).expect("driver"))
            .find(|t| t.contains("kind = \"attenuator\"") && t.contains("\n[safe_state]\n"))
            .expect("an attenuator driver");
        let at = driver.find("\n[safe_state]\n").expect("safe state table");
        let driver = format!("{}\n[safe_state]\n{safe_state}\n", &driver[..at]);
        let dir = tempfile::tempdir().expect("temp dir");
        std::fs::create_dir(dir.path().join("drivers")).expect("mkdir");
        std::fs::write(dir.path().join("drivers/att.toml"), driver).expect("write");
        let text = BUILT_IN_DEMO.replacen(
            "attenuator = { driver = \"sim-attenuator\", address = \"sim:\" }",
            "attenuator = { driver = \"att\", address = \"tcp:127.0.0.1:5025\" }",
            1,
        );
        let text = text.replacen("[bench]\n", "[bench]\ndrivers_dir = \"drivers\"\n", 1);
        Bench::parse(SourceFile::new(dir.path().join("b.toml"), text))
    }

    #[test]
    fn a_driver_safe_state_must_protect_the_receivers() {
        let e = driven_bench("atten_db = 0.0").expect_err("0 dB is no safe state");
        assert!(e.message.contains("leaves the receivers exposed"), "{e}");
        assert!(
            e.hint
                .as_deref()
                .unwrap_or("")
                .contains("at least 17.00 dB"),
            "{e}"
        );
        let e = driven_bench("atten_db = 16.75").expect_err("just under the limit");
        assert!(e.message.contains("exposed"), "{e}");
        let b = driven_bench("atten_db = 17.0").expect("the limit itself protects");
        let b2 = driven_bench("").expect("maximum by default");
        for (bench, want) in [(b, 17.0), (b2, 95.0)] {
            let Some(DriverKind::Attenuator(a)) = bench.drivers.get("attenuator").map(|d| &d.kind)
            else {
                panic!("driven attenuator");
            };
            assert_eq!(a.safe_atten_db, want);
        }
    }
}
