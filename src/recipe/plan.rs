//! The analysis pass: a raw recipe, its variables and the bench become a typed [`Plan`], or a
//! [`KeyError`] naming the key at fault. Nothing here touches an instrument.

use super::cells::{cells, Cells};
use super::raw::{RawRecipe, RawStage};
use super::script_source::ScriptSource;
use super::vars::Vars;
use crate::bench::Bench;
use crate::diagnostic::{Diagnostic, KeyError, SourceFile};
use crate::fit::predict::PredictModel;
use crate::fit::predict_file::read_model;
use std::path::{Path, PathBuf};

/// Channel bandwidths taucal accepts, MHz (IEEE 802.11 OFDM channel widths).
pub const BANDWIDTHS_MHZ: [u32; 5] = [20, 40, 80, 160, 320];

/// Most exchanges in one burst.
pub const MAX_FRAMES: u32 = 10_000;

/// A radio channel.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub struct Channel {
    /// Center frequency, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
}

/// Where a sweep's points come from.
#[derive(Debug, Clone, PartialEq)]
pub enum Points {
    /// Settings known when the recipe is checked.
    Fixed(Vec<f64>),
    /// The middle of each gain state's plateau, as an earlier gain-map stage finds it.
    MidPlateau {
        /// The gain-map stage.
        map_stage: String,
        /// Points per gain state.
        per_state: u32,
        /// Distance kept from each switch point, dB.
        margin_db: f64,
    },
}

/// Adaptive sampling: bursts continue at a point until its interval is narrow enough.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Adaptive {
    /// Target 95 % half-width of the point's main gain state.
    pub target_ci95_ps: f64,
    /// Most bursts per point.
    pub max_bursts: u32,
}

/// A declarative attenuation sweep (also the shape of gain-map and verification stages).
#[derive(Debug, Clone, PartialEq)]
pub struct Sweep {
    /// Stage name.
    pub name: String,
    /// Channel measured.
    pub channel: Channel,
    /// Attenuator settings, in order.
    pub points: Points,
    /// Bursts per point (the minimum, with adaptive sampling).
    pub bursts: u32,
    /// Exchanges per burst.
    pub frames: u32,
    /// Wait after each attenuation change.
    pub settle_ms: f64,
    /// Adaptive sampling, when a target is set.
    pub adaptive: Option<Adaptive>,
}

/// A verification stage: fresh exchanges judged against the table, not used to fit it.
#[derive(Debug, Clone, PartialEq)]
pub struct Verify {
    /// The measurement itself.
    pub sweep: Sweep,
    /// Receive level whose gain state gives the single-state calibration.
    pub single_state_rx_dbm: f64,
}

/// A Rhai script stage.
#[derive(Debug, Clone)]
pub struct Script {
    /// Stage name.
    pub name: String,
    /// Channel in force when the script starts.
    pub channel: Channel,
    /// The code and where it came from.
    pub source: ScriptSource,
    /// What the stage may spend.
    pub limits: ScriptLimits,
}

/// A script stage's limits (keys `time_limit_s`, `compute_limit_s`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ScriptLimits {
    /// Bench time the stage may take, s.
    pub time_limit_s: f64,
    /// Wall time the script may spend computing outside bench calls, s.
    pub compute_limit_s: f64,
}

/// Bench time a script stage may take unless it says otherwise: an hour.
pub const DEFAULT_SCRIPT_TIME_LIMIT_S: f64 = 3600.0;
/// Computing a script stage may do unless it says otherwise. Generous: the demo's script
/// computes for milliseconds, and 50 million operations take seconds.
pub const DEFAULT_SCRIPT_COMPUTE_LIMIT_S: f64 = 60.0;

/// A soak: set the chamber and wait until the DUT's temperature has settled.
#[derive(Debug, Clone, PartialEq)]
pub struct Soak {
    /// Stage name.
    pub name: String,
    /// Chamber setpoint.
    pub setpoint_c: f64,
    /// Settled means within this of the setpoint.
    pub within_c: f64,
    /// For this long.
    pub stable_s: f64,
    /// Reading interval.
    pub poll_s: f64,
    /// Longest wait.
    pub timeout_s: f64,
}

/// One stage of the plan.
#[derive(Debug, Clone)]
pub enum Stage {
    /// Attenuation sweep.
    Sweep(Sweep),
    /// Gain-state map: the points swept up, then down.
    GainMap(Sweep),
    /// Verification.
    Verify(Verify),
    /// Temperature soak.
    Soak(Soak),
    /// Script.
    Script(Script),
    /// Points that follow the unit: a coarse map, then one adaptive point per gain state.
    Cells(Cells),
}

impl Stage {
    /// The stage's name.
    pub fn name(&self) -> &str {
        match self {
            Stage::Sweep(s) | Stage::GainMap(s) => &s.name,
            Stage::Verify(v) => &v.sweep.name,
            Stage::Soak(s) => &s.name,
            Stage::Script(s) => &s.name,
            Stage::Cells(c) => &c.name,
        }
    }
}

/// Acceptance limits; a run that breaks one exits with status 1.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Acceptance {
    /// Largest 95 % half-width allowed in a measured cell.
    pub max_ci95_ps: Option<f64>,
    /// Fewest distinct DUT gain states the run must measure.
    pub min_gain_states: Option<u32>,
    /// Largest verification range error allowed with the per-gain table.
    pub max_range_error_m: Option<f64>,
    /// Refuse to run, rather than warn, when the reference's certificate is past its due date.
    pub refuse_overdue_reference: bool,
}

/// What the runner does when an instrument fails.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FaultPolicy {
    /// Retries of a failed command (after reconnecting and restoring the instrument's state).
    pub retries: u32,
    /// Wait before the first retry, doubled for each further one.
    pub backoff_ms: f64,
    /// Skip a point that still fails (and report it) instead of stopping the run.
    pub skip_failed_points: bool,
}

impl FaultPolicy {
    /// The wait before retry number `attempt` (from 1): the backoff, doubled for each retry
    /// after the first (capped at 2^16 times).
    pub fn wait_before_ms(&self, attempt: u32) -> f64 {
        self.backoff_ms * f64::from(1u32 << attempt.saturating_sub(1).min(16))
    }
}

impl Default for FaultPolicy {
    fn default() -> Self {
        FaultPolicy {
            retries: 3,
            backoff_ms: 200.0,
            skip_failed_points: false,
        }
    }
}

/// A validated recipe, ready to run on a bench.
#[derive(Debug, Clone)]
pub struct Plan {
    /// Recipe name.
    pub name: String,
    /// Free text.
    pub description: String,
    /// The recipe file.
    pub source: SourceFile,
    /// Variables after `--set`.
    pub vars: Vars,
    /// Stages in order.
    pub stages: Vec<Stage>,
    /// Acceptance limits.
    pub accept: Acceptance,
    /// Fitter rejection threshold, scaled MADs.
    pub reject_mad: f64,
    /// The DUT's number of gain states, when the recipe says; unmeasured ones are modelled.
    pub gain_states: Option<u32>,
    /// The population model that predicts unmeasured cells (`[fit] predict`).
    pub predict: Option<Predictor>,
    /// What to do when an instrument fails.
    pub faults: FaultPolicy,
}

/// A recipe's `[fit] predict`: the model file and what it holds.
#[derive(Debug, Clone, PartialEq)]
pub struct Predictor {
    /// The model file, as found from the recipe's folder.
    pub path: PathBuf,
    /// The model.
    pub model: PredictModel,
}

/// Default rejection threshold (scaled MADs).
pub const DEFAULT_REJECT_MAD: f64 = 5.0;

/// The lowest rejection threshold taken: beyond 2 scaled MADs lie 4.6 % of a normal sample
/// (2·(1 − Φ(2)), a standard normal table), beyond 1.5 already 13 %.
pub const MIN_REJECT_MAD: f64 = 2.0;

/// What to give instead of a threshold below [`MIN_REJECT_MAD`].
pub const REJECT_MAD_HINT: &str = "use 2.0 or more (5.0 is the default)";

pub(super) fn build(
    raw: RawRecipe,
    vars: Vars,
    bench: &Bench,
    source: &SourceFile,
    base_dir: &Path,
) -> Result<Plan, Diagnostic> {
    let located = |e: KeyError| source.key_error(e);
    if raw.stage.is_empty() {
        return Err(
            Diagnostic::at(source, Some(0..0), "the recipe has no stages")
                .with_hint("add at least one [[stage]] with kind = \"sweep\" or kind = \"script\""),
        );
    }
    let name = raw.recipe.name.trim().to_string();
    if name.is_empty()
        || !name
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || "-_.".contains(c))
    {
        return Err(located(KeyError::new(
            "recipe.name",
            format!("\"{name}\" is not a usable name"),
            "use letters, digits, '-', '_' or '.', e.g. \"rx-gain-sweep\" (it names the run directory)",
        )));
    }
    let mut stages = Vec::with_capacity(raw.stage.len());
    for (i, st) in raw.stage.iter().enumerate() {
        let key = format!("stage.{i}");
        if raw.stage[..i].iter().any(|o| o.name == st.name) {
            return Err(located(KeyError::new(
                format!("{key}.name"),
                format!("\"{}\" names an earlier stage too", st.name),
                "give every stage its own name",
            )));
        }
        let stage =
            match st.kind.as_str() {
                "sweep" => Stage::Sweep(sweep(&key, st, &vars, bench, &stages).map_err(located)?),
                "gainmap" => Stage::GainMap(gain_map(&key, st, &vars, bench).map_err(located)?),
                "verify" => Stage::Verify(verify(&key, st, &vars, bench).map_err(located)?),
                "soak" => Stage::Soak(soak(&key, st, &vars, bench).map_err(located)?),
                "script" => Stage::Script(script(&key, i, st, &vars, source, base_dir)?),
                "cells" => Stage::Cells(cells(&key, st, &vars, bench).map_err(located)?),
                other => return Err(located(KeyError::new(
                    format!("{key}.kind"),
                    format!("\"{other}\" is not a stage kind"),
                    "stage kinds are \"sweep\", \"cells\", \"gainmap\", \"verify\", \"soak\" and \"script\"",
                ))),
            };
        stages.push(stage);
    }
    let accept = Acceptance {
        max_ci95_ps: raw
            .accept
            .max_ci95_ps
            .as_ref()
            .map(|v| positive(&vars, "accept.max_ci95_ps", v))
            .transpose()
            .map_err(located)?,
        min_gain_states: raw
            .accept
            .min_gain_states
            .as_ref()
            .map(|v| vars.count("accept.min_gain_states", v, 1, 64))
            .transpose()
            .map_err(located)?,
        max_range_error_m: raw
            .accept
            .max_range_error_m
            .as_ref()
            .map(|v| positive(&vars, "accept.max_range_error_m", v))
            .transpose()
            .map_err(located)?,
        refuse_overdue_reference: raw.accept.refuse_overdue_reference,
    };
    if accept.max_range_error_m.is_some() && !stages.iter().any(|s| matches!(s, Stage::Verify(_))) {
        return Err(located(KeyError::new(
            "accept.max_range_error_m",
            "needs a verify stage to judge",
            "add a [[stage]] with kind = \"verify\", or remove the limit",
        )));
    }
    let reject_mad = match &raw.fit.reject_mad {
        Some(v) => {
            let k = positive(&vars, "fit.reject_mad", v).map_err(located)?;
            if k < MIN_REJECT_MAD {
                return Err(located(KeyError::new(
                    "fit.reject_mad",
                    format!("{k} would reject much of a clean normal sample"),
                    REJECT_MAD_HINT,
                )));
            }
            k
        }
        None => DEFAULT_REJECT_MAD,
    };
    let gain_states = raw
        .fit
        .gain_states
        .as_ref()
        .map(|v| vars.count("fit.gain_states", v, 1, 64))
        .transpose()
        .map_err(located)?;
    let predict = match &raw.fit.predict {
        Some(rel) => {
            let path = base_dir.join(rel);
            if !path.is_file() {
                return Err(located(KeyError::new(
                    "fit.predict",
                    format!("\"{rel}\": no such file ({})", path.display()),
                    "give the model `taucal fleet plan --out` wrote, relative to the recipe's folder",
                )));
            }
            let model = read_model(&path)?;
            Some(Predictor { path, model })
        }
        None => None,
    };
    let defaults = FaultPolicy::default();
    let faults =
        FaultPolicy {
            retries: match &raw.faults.retries {
                Some(v) => vars.count("faults.retries", v, 0, 100).map_err(located)?,
                None => defaults.retries,
            },
            backoff_ms: match &raw.faults.backoff_ms {
                Some(v) => {
                    let b = vars.number("faults.backoff_ms", v).map_err(located)?;
                    if !(0.0..=600_000.0).contains(&b) {
                        return Err(located(KeyError::new(
                            "faults.backoff_ms",
                            format!("is {b}"),
                            "give 0 to 600000 ms",
                        )));
                    }
                    b
                }
                None => defaults.backoff_ms,
            },
            skip_failed_points: match &raw.faults.on_point_failure {
                None => false,
                Some(v) => match vars
                    .deref("faults.on_point_failure", v)
                    .map_err(located)?
                    .as_str()
                {
                    Some("stop") => false,
                    Some("skip") => true,
                    _ => return Err(located(KeyError::new(
                        "faults.on_point_failure",
                        "is neither \"stop\" nor \"skip\"",
                        "\"stop\" ends the run (resumable); \"skip\" reports the point and goes on",
                    ))),
                },
            },
        };
    Ok(Plan {
        faults,
        gain_states,
        predict,
        name,
        description: raw.recipe.description,
        source: source.clone(),
        vars,
        stages,
        accept,
        reject_mad,
    })
}

pub(super) fn positive(vars: &Vars, key: &str, v: &toml::Value) -> Result<f64, KeyError> {
    let x = vars.number(key, v)?;
    if x > 0.0 {
        Ok(x)
    } else {
        Err(KeyError::new(
            key,
            format!("is {x}"),
            "give a value greater than 0",
        ))
    }
}

/// A distance kept from a switch point, dB: 0 to 30.
pub(super) fn margin(vars: &Vars, key: &str, v: &toml::Value) -> Result<f64, KeyError> {
    let m = vars.number(key, v)?;
    if (0.0..=30.0).contains(&m) {
        Ok(m)
    } else {
        Err(KeyError::new(key, format!("is {m}"), "give 0 to 30 dB"))
    }
}

pub(super) fn require<'a>(
    key: &str,
    name: &str,
    v: &'a Option<toml::Value>,
    hint: &str,
) -> Result<&'a toml::Value, KeyError> {
    v.as_ref()
        .ok_or_else(|| KeyError::new(key, format!("needs `{name}`"), hint.to_string()))
}

pub(super) fn channel(key: &str, st: &RawStage, vars: &Vars) -> Result<Channel, KeyError> {
    let center_key = format!("{key}.center_mhz");
    let center = require(
        key,
        "center_mhz",
        &st.center_mhz,
        "add center_mhz = 5180 (or another channel's center in MHz)",
    )?;
    let center = vars.number(&center_key, center)?;
    if !(2400.0..=7200.0).contains(&center) || center.fract() != 0.0 {
        return Err(KeyError::new(
            center_key,
            format!("{center} MHz is not a Wi-Fi channel center"),
            "give a whole number of MHz in the 2.4, 5 or 6 GHz bands, e.g. 2437, 5180, 5955",
        ));
    }
    let bw_key = format!("{key}.bw_mhz");
    let bw = require(
        key,
        "bw_mhz",
        &st.bw_mhz,
        "add bw_mhz = 20, 40, 80, 160 or 320",
    )?;
    let bw = vars.number(&bw_key, bw)?;
    if !BANDWIDTHS_MHZ.iter().any(|b| f64::from(*b) == bw) {
        return Err(KeyError::new(
            bw_key,
            format!("{bw} MHz is not a channel width"),
            "use 20, 40, 80, 160 or 320",
        ));
    }
    Ok(Channel {
        center_mhz: center as u32,
        bw_mhz: bw as u32,
    })
}

/// Refuses any optional stage key that `kind` does not take.
pub(super) fn allow_only(
    key: &str,
    kind: &str,
    st: &RawStage,
    allowed: &[&str],
) -> Result<(), KeyError> {
    let present = [
        ("center_mhz", st.center_mhz.is_some()),
        ("bw_mhz", st.bw_mhz.is_some()),
        ("atten_db", st.atten_db.is_some()),
        ("bursts", st.bursts.is_some()),
        ("frames", st.frames.is_some()),
        ("settle_ms", st.settle_ms.is_some()),
        ("target_ci95_ps", st.target_ci95_ps.is_some()),
        ("max_bursts", st.max_bursts.is_some()),
        ("single_state_rx_dbm", st.single_state_rx_dbm.is_some()),
        ("setpoint_c", st.setpoint_c.is_some()),
        ("within_c", st.within_c.is_some()),
        ("stable_s", st.stable_s.is_some()),
        ("poll_s", st.poll_s.is_some()),
        ("timeout_s", st.timeout_s.is_some()),
        ("script", st.script.is_some()),
        ("file", st.file.is_some()),
        ("time_limit_s", st.time_limit_s.is_some()),
        ("compute_limit_s", st.compute_limit_s.is_some()),
        ("map_db", st.map_db.is_some()),
        ("map_bursts", st.map_bursts.is_some()),
        ("margin_db", st.margin_db.is_some()),
    ];
    match present
        .iter()
        .find(|(name, p)| *p && !allowed.contains(name))
    {
        Some((name, _)) => Err(KeyError::new(
            format!("{key}.{name}"),
            format!("does not belong in a {kind} stage"),
            format!("a {kind} stage takes {}", allowed.join(", ")),
        )),
        None => Ok(()),
    }
}

/// Keys shared by sweeps, gain maps and verifications.
pub(super) fn measurement(
    key: &str,
    st: &RawStage,
    vars: &Vars,
    points: Points,
) -> Result<Sweep, KeyError> {
    let channel = channel(key, st, vars)?;
    let bursts = match &st.bursts {
        Some(v) => vars.count(&format!("{key}.bursts"), v, 1, 100_000)?,
        None => 1,
    };
    let frames_v = require(
        key,
        "frames",
        &st.frames,
        "add frames = 16 (exchanges per burst)",
    )?;
    let frames = vars.count(&format!("{key}.frames"), frames_v, 2, MAX_FRAMES)?;
    let settle_ms = match &st.settle_ms {
        Some(v) => {
            let s = vars.number(&format!("{key}.settle_ms"), v)?;
            if !(0.0..=3_600_000.0).contains(&s) {
                return Err(KeyError::new(
                    format!("{key}.settle_ms"),
                    format!("is {s}"),
                    "give 0 to 3600000 ms",
                ));
            }
            s
        }
        None => 0.0,
    };
    Ok(Sweep {
        name: st.name.clone(),
        channel,
        points,
        bursts,
        frames,
        settle_ms,
        adaptive: None,
    })
}

pub(super) const ATTEN_HINT: &str =
    "add atten_db = { from = 20.0, to = 80.0, step = 2.0 }, a list, or { over = \"usable\", step = 2.0 }";

fn sweep(
    key: &str,
    st: &RawStage,
    vars: &Vars,
    bench: &Bench,
    earlier: &[Stage],
) -> Result<Sweep, KeyError> {
    allow_only(
        key,
        "sweep",
        st,
        &[
            "center_mhz",
            "bw_mhz",
            "atten_db",
            "bursts",
            "frames",
            "settle_ms",
            "target_ci95_ps",
            "max_bursts",
        ],
    )?;
    let atten_key = format!("{key}.atten_db");
    let atten = require(key, "atten_db", &st.atten_db, ATTEN_HINT)?;
    let points = match vars.deref(&atten_key, atten)? {
        toml::Value::Table(t) if t.contains_key("mid_plateau") => {
            mid_plateau(&atten_key, t, vars, st, earlier)?
        }
        _ => Points::Fixed(points(&atten_key, atten, vars, bench)?),
    };
    let mut sweep = measurement(key, st, vars, points)?;
    sweep.adaptive = match (&st.target_ci95_ps, &st.max_bursts) {
        (None, None) => None,
        (None, Some(_)) => {
            return Err(KeyError::new(
                format!("{key}.max_bursts"),
                "only applies with target_ci95_ps",
                "add target_ci95_ps = 50.0, or remove max_bursts",
            ))
        }
        (Some(t), max) => {
            let target_ci95_ps = positive(vars, &format!("{key}.target_ci95_ps"), t)?;
            let max_bursts = match max {
                Some(m) => vars.count(&format!("{key}.max_bursts"), m, 1, 100_000)?,
                None => 1000,
            };
            if max_bursts < sweep.bursts.max(2) {
                return Err(KeyError::new(
                    format!("{key}.max_bursts"),
                    format!("{max_bursts} is below the {} bursts every point starts with", sweep.bursts.max(2)),
                    "max_bursts must be at least bursts (and at least 2: one burst gives no interval)",
                ));
            }
            // One burst has no between-burst spread, so an interval needs two.
            sweep.bursts = sweep.bursts.max(2);
            Some(Adaptive {
                target_ci95_ps,
                max_bursts,
            })
        }
    };
    Ok(sweep)
}

fn mid_plateau(
    key: &str,
    t: &toml::Table,
    vars: &Vars,
    st: &RawStage,
    earlier: &[Stage],
) -> Result<Points, KeyError> {
    if let Some(unknown) = t
        .keys()
        .find(|k| !["mid_plateau", "per_state", "margin_db"].contains(&k.as_str()))
    {
        return Err(KeyError::new(
            format!("{key}.{unknown}"),
            "is not a mid-plateau key",
            "write { mid_plateau = \"STAGE\", per_state = 3, margin_db = 2.0 }",
        ));
    }
    let map_stage = t
        .get("mid_plateau")
        .and_then(|v| vars.deref(key, v).ok())
        .and_then(toml::Value::as_str)
        .unwrap_or_default()
        .to_string();
    let map = earlier.iter().find_map(|s| match s {
        Stage::GainMap(m) if m.name == map_stage => Some(m),
        _ => None,
    });
    let Some(map) = map else {
        let maps: Vec<&str> = earlier
            .iter()
            .filter(|s| matches!(s, Stage::GainMap(_)))
            .map(Stage::name)
            .collect();
        return Err(KeyError::new(
            format!("{key}.mid_plateau"),
            format!("\"{map_stage}\" is not an earlier gainmap stage"),
            if maps.is_empty() {
                "add a [[stage]] with kind = \"gainmap\" before this one".to_string()
            } else {
                format!("earlier gainmap stages: {}", maps.join(", "))
            },
        ));
    };
    let per_state = match t.get("per_state") {
        Some(v) => vars.count(&format!("{key}.per_state"), v, 1, 100)?,
        None => 1,
    };
    let margin_db = match t.get("margin_db") {
        Some(v) => margin(vars, &format!("{key}.margin_db"), v)?,
        None => 2.0,
    };
    let channel_key = format!(
        "stage.{}",
        key.trim_start_matches("stage.")
            .trim_end_matches(".atten_db")
    );
    let here = channel(&channel_key, st, vars)?;
    if here != map.channel {
        return Err(KeyError::new(
            format!("{channel_key}.center_mhz"),
            format!(
                "differs from the channel mapped by \"{map_stage}\" ({} MHz / {} MHz)",
                map.channel.center_mhz, map.channel.bw_mhz
            ),
            "gain states are mapped per channel: measure on the mapped channel",
        ));
    }
    Ok(Points::MidPlateau {
        map_stage,
        per_state,
        margin_db,
    })
}

fn gain_map(key: &str, st: &RawStage, vars: &Vars, bench: &Bench) -> Result<Sweep, KeyError> {
    allow_only(
        key,
        "gainmap",
        st,
        &[
            "center_mhz",
            "bw_mhz",
            "atten_db",
            "bursts",
            "frames",
            "settle_ms",
        ],
    )?;
    let atten_key = format!("{key}.atten_db");
    let atten = require(key, "atten_db", &st.atten_db, ATTEN_HINT)?;
    let pts = points(&atten_key, atten, vars, bench)?;
    if pts.len() < 3 {
        return Err(KeyError::new(
            atten_key,
            "has fewer than 3 points",
            "a map needs a range: { over = \"usable\", step = 1.0 }",
        ));
    }
    measurement(key, st, vars, Points::Fixed(pts))
}

fn soak(key: &str, st: &RawStage, vars: &Vars, bench: &Bench) -> Result<Soak, KeyError> {
    allow_only(
        key,
        "soak",
        st,
        &["setpoint_c", "within_c", "stable_s", "poll_s", "timeout_s"],
    )?;
    if !bench.roles.contains_key("chamber") {
        return Err(KeyError::new(
            format!("{key}.kind"),
            "needs a chamber, and the bench has no `chamber` role",
            "add chamber = { driver = \"sim-chamber\", address = \"sim:\" } under the bench's [roles] (and [sim.chamber] when simulated)",
        ));
    }
    let setpoint = require(key, "setpoint_c", &st.setpoint_c, "add setpoint_c = 45.0")?;
    let setpoint_c = vars.number(&format!("{key}.setpoint_c"), setpoint)?;
    if !(-70.0..=180.0).contains(&setpoint_c) {
        return Err(KeyError::new(
            format!("{key}.setpoint_c"),
            format!("{setpoint_c} °C is outside -70..180 °C"),
            "give a temperature the chamber and the DUT are rated for",
        ));
    }
    if let Some(crate::instrument::driver_file::DriverKind::Chamber(c)) =
        bench.drivers.get("chamber").map(|d| &d.kind)
    {
        let [lo, hi] = c.setpoint_c;
        if !(lo..=hi).contains(&setpoint_c) {
            return Err(KeyError::new(
                format!("{key}.setpoint_c"),
                format!(
                    "{setpoint_c} °C is outside the chamber driver's setpoint range {lo}..{hi} °C"
                ),
                "give a temperature the chamber and the DUT are rated for",
            ));
        }
    }
    let get = |name: &str, v: &Option<toml::Value>, default: f64| match v {
        Some(v) => positive(vars, &format!("{key}.{name}"), v),
        None => Ok(default),
    };
    Ok(Soak {
        name: st.name.clone(),
        setpoint_c,
        within_c: get("within_c", &st.within_c, 0.5)?,
        stable_s: get("stable_s", &st.stable_s, 120.0)?,
        poll_s: get("poll_s", &st.poll_s, 10.0)?,
        timeout_s: get("timeout_s", &st.timeout_s, 7200.0)?,
    })
}

fn verify(key: &str, st: &RawStage, vars: &Vars, bench: &Bench) -> Result<Verify, KeyError> {
    allow_only(
        key,
        "verify",
        st,
        &[
            "center_mhz",
            "bw_mhz",
            "atten_db",
            "bursts",
            "frames",
            "settle_ms",
            "single_state_rx_dbm",
        ],
    )?;
    let atten_key = format!("{key}.atten_db");
    let atten = require(key, "atten_db", &st.atten_db, ATTEN_HINT)?;
    let pts = points(&atten_key, atten, vars, bench)?;
    let level_key = format!("{key}.single_state_rx_dbm");
    let level = require(
        key,
        "single_state_rx_dbm",
        &st.single_state_rx_dbm,
        "add single_state_rx_dbm = -45.0: the receive level of the usual one-point calibration",
    )?;
    let single_state_rx_dbm = vars.number(&level_key, level)?;
    let (lo, hi) = (
        bench.dut_rx_dbm(pts[pts.len() - 1].max(pts[0])),
        bench.dut_rx_dbm(pts[0].min(pts[pts.len() - 1])),
    );
    if !(lo - 1e-9..=hi + 1e-9).contains(&single_state_rx_dbm) {
        return Err(KeyError::new(
            level_key,
            format!("{single_state_rx_dbm} dBm is outside the levels this stage verifies ({lo:.1} to {hi:.1} dBm)"),
            "choose a level inside the stage's attenuation range",
        ));
    }
    Ok(Verify {
        sweep: measurement(key, st, vars, Points::Fixed(pts))?,
        single_state_rx_dbm,
    })
}

pub(super) fn points(
    key: &str,
    v: &toml::Value,
    vars: &Vars,
    bench: &Bench,
) -> Result<Vec<f64>, KeyError> {
    let v = vars.deref(key, v)?;
    let pts = match v {
        toml::Value::Array(items) => items
            .iter()
            .enumerate()
            .map(|(i, x)| vars.number(&format!("{key}.{i}"), x))
            .collect::<Result<Vec<_>, _>>()?,
        toml::Value::Table(t) => {
            if let Some(unknown) = t
                .keys()
                .find(|k| !["from", "to", "step", "over"].contains(&k.as_str()))
            {
                return Err(KeyError::new(
                    format!("{key}.{unknown}"),
                    "is not a sweep-range key",
                    "a range is { from, to, step } or { over = \"usable\", step }",
                ));
            }
            let step = match t.get("step") {
                Some(s) => vars.number(&format!("{key}.step"), s)?,
                None => return Err(KeyError::new(key, "has no `step`", "add step = 2.0 (dB)")),
            };
            let (from, to) = match t.get("over") {
                Some(over) => {
                    if vars.deref(key, over)?.as_str() != Some("usable")
                        || t.contains_key("from")
                        || t.contains_key("to")
                    {
                        return Err(KeyError::new(
                            format!("{key}.over"),
                            "must be \"usable\", without from/to",
                            "{ over = \"usable\", step = 2.0 } sweeps the bench's usable range",
                        ));
                    }
                    bench.usable_atten_db().ok_or_else(|| {
                        KeyError::new(
                            key,
                            "the bench has no usable attenuation range",
                            "check the bench's input limits",
                        )
                    })?
                }
                None => {
                    let get = |k: &str| match t.get(k) {
                        Some(x) => vars.number(&format!("{key}.{k}"), x),
                        None => Err(KeyError::new(
                            key,
                            format!("has no `{k}`"),
                            "a range is { from, to, step }",
                        )),
                    };
                    (get("from")?, get("to")?)
                }
            };
            let step_ok = step > 0.0 && {
                let k = step / bench.attenuator.step_db;
                (k - k.round()).abs() < 1e-6
            };
            if !step_ok {
                return Err(KeyError::new(
                    format!("{key}.step"),
                    format!(
                        "{step} dB is not a positive multiple of the attenuator's {} dB step",
                        bench.attenuator.step_db
                    ),
                    format!("use a multiple of {} dB", bench.attenuator.step_db),
                ));
            }
            let n = ((to - from) / step + 1e-9).floor();
            if !(0.0..=100_000.0).contains(&n) {
                return Err(KeyError::new(
                    key,
                    format!("from {from} to {to} by {step} is not an ascending range of at most 100000 points"),
                    "make `to` ≥ `from`",
                ));
            }
            (0..=n as u32).map(|i| from + f64::from(i) * step).collect()
        }
        other => {
            return Err(KeyError::new(
                key,
                format!("is a {}", other.type_str()),
                "give a list of dB values, { from, to, step }, or { over = \"usable\", step }",
            ))
        }
    };
    if pts.is_empty() {
        return Err(KeyError::new(
            key,
            "has no points",
            "give at least one attenuation",
        ));
    }
    for p in &pts {
        if let Some((msg, hint)) = bench.refuse_atten(*p) {
            return Err(KeyError::new(key, msg, hint));
        }
    }
    Ok(pts)
}

fn script(
    key: &str,
    index: usize,
    st: &RawStage,
    vars: &Vars,
    source: &SourceFile,
    base_dir: &Path,
) -> Result<Script, Diagnostic> {
    let located = |e: KeyError| source.key_error(e);
    allow_only(
        key,
        "script",
        st,
        &[
            "center_mhz",
            "bw_mhz",
            "script",
            "file",
            "time_limit_s",
            "compute_limit_s",
        ],
    )
    .map_err(located)?;
    let limit = |name: &str, v: &Option<toml::Value>, default: f64, max: f64| match v {
        None => Ok(default),
        Some(v) => {
            let k = format!("{key}.{name}");
            let s = positive(vars, &k, v)?;
            if s > max {
                return Err(KeyError::new(
                    k,
                    format!("{s} s is more than {max} s"),
                    format!("give at most {max} s"),
                ));
            }
            Ok(s)
        }
    };
    let limits = ScriptLimits {
        time_limit_s: limit(
            "time_limit_s",
            &st.time_limit_s,
            DEFAULT_SCRIPT_TIME_LIMIT_S,
            7.0 * 86_400.0,
        )
        .map_err(located)?,
        compute_limit_s: limit(
            "compute_limit_s",
            &st.compute_limit_s,
            DEFAULT_SCRIPT_COMPUTE_LIMIT_S,
            86_400.0,
        )
        .map_err(located)?,
    };
    let channel = channel(key, st, vars).map_err(located)?;
    let code = match (&st.script, &st.file) {
        (Some(_), None) => ScriptSource::inline(source, &format!("stage.{index}.script"))?,
        (None, Some(file)) => ScriptSource::from_file(base_dir, file, source, &format!("stage.{index}.file"))?,
        _ => {
            return Err(located(KeyError::new(
                key,
                "needs exactly one of `script` (inline Rhai) and `file` (a .rhai file beside the recipe)",
                "add script = '''…''' or file = \"scripts/name.rhai\"",
            )))
        }
    };
    Ok(Script {
        name: st.name.clone(),
        channel,
        source: code,
        limits,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn retry_waits_double_from_the_backoff() {
        // Exponential backoff, doubling per retry (common practice), capped at 2^16 times.
        let policy = FaultPolicy {
            backoff_ms: 200.0,
            ..FaultPolicy::default()
        };
        let waits: Vec<f64> = (1..=4).map(|a| policy.wait_before_ms(a)).collect();
        assert_eq!(waits, [200.0, 400.0, 800.0, 1600.0]);
        assert_eq!(policy.wait_before_ms(40), 200.0 * 65536.0);
    }
}
