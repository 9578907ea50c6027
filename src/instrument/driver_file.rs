//! Driver files (`drivers/NAME.toml`): an instrument described as data — its capability,
//! command templates, reply patterns, limits, settle time and safe state — so a new instrument
//! is a new file, not a recompile.
//!
//! Loading validates everything (templates against the parameters each command offers, regular
//! expressions and the named fields they must capture, limits) and points errors at the file's
//! line, like recipe and bench errors. Nothing here talks to an instrument.

pub mod chamber;

use super::command::{Command, RunCommand};
use super::template::{on_grid, ParamKind, Template};
use crate::diagnostic::{did_you_mean, Diagnostic, KeyError, SourceFile};
pub use chamber::{ChamberDriver, ChamberSafe, KIND_CHAMBER};
use regex::Regex;
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::Path;
use std::time::Duration;

/// Kind name of an attenuator driver.
pub const KIND_ATTENUATOR: &str = "attenuator";
/// Kind name of a ranging-device console driver.
pub const KIND_RANGING_CONSOLE: &str = "ranging-console";

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawDriver {
    driver: RawMeta,
    link: RawLink,
    #[serde(default)]
    scpi: Option<RawScpi>,
    command: RawCommands,
    reply: BTreeMap<String, String>,
    #[serde(default)]
    limits: RawLimits,
    #[serde(default)]
    timing: RawTiming,
    safe_state: RawSafe,
    #[serde(default)]
    reports: Option<RawReports>,
}

/// The `[command]` table: command lines (text) by key, and apart from them the commands given
/// as programs (`{ run = [...] }`). It reads as the map of lines, which is what every kind
/// offers; only the kinds that offer `run` look at `runs`.
#[derive(Debug, Default)]
struct RawCommands {
    lines: BTreeMap<String, String>,
    runs: BTreeMap<String, Vec<String>>,
}

impl std::ops::Deref for RawCommands {
    type Target = BTreeMap<String, String>;
    fn deref(&self) -> &Self::Target {
        &self.lines
    }
}

/// One `[command]` value: a line, or a table holding `run` only.
enum RawCommand {
    Line(String),
    Run(Vec<String>),
}

impl<'de> Deserialize<'de> for RawCommand {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct Visit;
        impl<'de> serde::de::Visitor<'de> for Visit {
            type Value = RawCommand;
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                f.write_str(
                    "a command line (text) or a program to run, `{ run = [\"program\", \"arg\", …] }`",
                )
            }
            fn visit_str<E: serde::de::Error>(self, v: &str) -> Result<RawCommand, E> {
                Ok(RawCommand::Line(v.to_string()))
            }
            fn visit_map<A: serde::de::MapAccess<'de>>(
                self,
                mut map: A,
            ) -> Result<RawCommand, A::Error> {
                let mut run = None;
                while let Some(key) = map.next_key::<String>()? {
                    if key != "run" || run.is_some() {
                        return Err(serde::de::Error::custom(format!(
                            "`{key}`: a command's table holds `run` only, e.g. \
                             {{ run = [\"tool\", \"--frames\", \"{{frames}}\"] }}"
                        )));
                    }
                    run = Some(map.next_value::<Vec<String>>()?);
                }
                run.map(RawCommand::Run)
                    .ok_or_else(|| serde::de::Error::missing_field("run"))
            }
        }
        d.deserialize_any(Visit)
    }
}

impl<'de> Deserialize<'de> for RawCommands {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let mut out = RawCommands::default();
        for (key, command) in BTreeMap::<String, RawCommand>::deserialize(d)? {
            match command {
                RawCommand::Line(line) => {
                    out.lines.insert(key, line);
                }
                RawCommand::Run(words) => {
                    out.runs.insert(key, words);
                }
            }
        }
        Ok(out)
    }
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawMeta {
    kind: String,
    maker: String,
    model: String,
    #[serde(default)]
    description: String,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawLink {
    line_ending: String,
    timeout_ms: f64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawScpi {
    wait_complete: bool,
    error_queue: bool,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawLimits {
    range_db: Option<[f64; 2]>,
    step_db: Option<f64>,
    max_input_dbm: Option<f64>,
    channels: Option<u32>,
    frames: Option<[u32; 2]>,
    center_mhz: Option<[u32; 2]>,
    bw_mhz: Option<Vec<u32>>,
    setpoint_c: Option<[f64; 2]>,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTiming {
    settle_ms: Option<f64>,
}

/// What a ranging console's exchange lines mean beyond their captures.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawReports {
    range_unit: Option<String>,
    applied_k_ps: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSafe {
    atten_db: Option<f64>,
    setpoint_c: Option<f64>,
    command: Option<String>,
    reply: Option<String>,
}

/// How lines travel.
#[derive(Debug, Clone, PartialEq)]
pub struct LinkSettings {
    /// Terminator appended to every line sent (`\n` or `\r\n`); replies may end with either.
    pub line_ending: String,
    /// How long to wait for a connection and for each reply line.
    pub timeout: Duration,
}

/// A validated driver file.
#[derive(Debug, Clone)]
pub struct DriverFile {
    /// The name benches use (the file stem).
    pub name: String,
    /// The file, kept for messages.
    pub source: SourceFile,
    /// Maker, as the file says.
    pub maker: String,
    /// Model, as the file says.
    pub model: String,
    /// Free text.
    pub description: String,
    /// Line settings.
    pub link: LinkSettings,
    /// What the instrument can do, and how it is asked.
    pub kind: DriverKind,
}

/// The capability a driver file provides.
#[derive(Debug, Clone)]
pub enum DriverKind {
    /// A step attenuator speaking SCPI.
    Attenuator(AttenuatorDriver),
    /// A ranging device's line console.
    RangingConsole(Box<ConsoleDriver>),
    /// A climatic chamber.
    Chamber(Box<ChamberDriver>),
}

impl DriverKind {
    /// The kind's name as written in files.
    pub fn name(&self) -> &'static str {
        match self {
            DriverKind::Attenuator(_) => KIND_ATTENUATOR,
            DriverKind::RangingConsole(_) => KIND_RANGING_CONSOLE,
            DriverKind::Chamber(_) => KIND_CHAMBER,
        }
    }
}

/// An attenuator driver: SCPI basics plus the file's own setting commands.
#[derive(Debug, Clone)]
pub struct AttenuatorDriver {
    /// Sets the attenuation; parameter `db`.
    pub set_atten: Template,
    /// Asks for the attenuation.
    pub get_atten: Template,
    /// Reply to `get_atten`; captures `db`.
    pub get_atten_reply: Regex,
    /// Ask `*OPC?` after each setting and wait for `1`.
    pub wait_complete: bool,
    /// Drain `SYST:ERR?` after each setting; any error fails the run.
    pub error_queue: bool,
    /// Lowest and highest setting.
    pub range_db: [f64; 2],
    /// Smallest step.
    pub step_db: f64,
    /// Highest RF power the attenuator's input takes without damage.
    pub max_input_dbm: f64,
    /// Wait after a setting before it counts as taken effect (relays settling).
    pub settle_ms: f64,
    /// The setting that protects both receivers.
    pub safe_atten_db: f64,
    /// Independent channels (`limits.channels`, 1 unless given); with more than one, every
    /// command names its channel as `{channel}`.
    pub channels: u32,
}

/// A ranging device's console: a line protocol defined entirely by the file.
#[derive(Debug, Clone)]
pub struct ConsoleDriver {
    /// Asks for the device's identity.
    pub identify: Command,
    /// Reply to `identify`; captures `id`.
    pub identify_reply: Regex,
    /// Starts a burst; parameters `frames`, `center_mhz`, `bw_mhz`.
    pub start_burst: Command,
    /// Acknowledgment of `start_burst`, if the console sends one.
    pub start_burst_reply: Option<Regex>,
    /// One exchange, or one burst's summary: captures a complete form of report — `t1`…`t4`,
    /// `rtt` (ps) or `range` (in `range_unit`) — and optionally `frames`, `applied_k` (ps),
    /// `gain`, `rssi`, `ref_gain`, `status`, `seq`.
    pub exchange: Regex,
    /// The unit of the `range` capture, where the pattern has one.
    pub range_unit: Option<RangeUnit>,
    /// The K the device removes before it reports a distance, as the driver declares it
    /// (`[reports] applied_k_ps`); a reported `applied_k` must agree with it.
    pub applied_k_ps: Option<f64>,
    /// Whether exchange lines summarise a burst (the pattern captures `frames`): then a burst
    /// answers with exactly one of them, whatever the number of frames asked for.
    pub burst_summary: bool,
    /// The burst's last line.
    pub burst_end: Regex,
    /// A burst that failed; captures `reason` where it can.
    pub burst_fail: Regex,
    /// Unsolicited lines to ignore (a boot banner, prompts).
    pub banner: Option<Regex>,
    /// Asks for the temperature, with its reply (capturing `c`), where the device measures one.
    pub temperature: Option<(Command, Regex)>,
    /// How the console writes a value it does not have.
    pub missing: String,
    /// Exchanges per burst the device accepts.
    pub frames: [u32; 2],
    /// Center frequencies it accepts.
    pub center_mhz: [u32; 2],
    /// Bandwidths it accepts.
    pub bw_mhz: Vec<u32>,
    /// Highest receive level its receiver takes (damage limit with margin).
    pub max_input_dbm: f64,
    /// Stops ranging: the safe state.
    pub safe_command: Template,
    /// Reply to the safe-state command, if any.
    pub safe_reply: Option<Regex>,
}

impl ConsoleDriver {
    /// Whether the driver learns the K a range-reporting device removed: declared in its
    /// `[reports]`, or captured from each reply. Without it the bench must declare the K.
    pub fn learns_applied_k(&self) -> bool {
        self.applied_k_ps.is_some()
            || self
                .exchange
                .capture_names()
                .flatten()
                .any(|n| n == "applied_k")
    }
}

/// The unit a console writes distances in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RangeUnit {
    /// Millimetres.
    Mm,
    /// Centimetres.
    Cm,
}

impl RangeUnit {
    /// Millimetres in one of this unit.
    pub fn mm(self) -> f64 {
        match self {
            RangeUnit::Mm => 1.0,
            RangeUnit::Cm => 10.0,
        }
    }
}

/// Fields an exchange pattern may capture; a complete form needs `t1`…`t4`, `rtt` or `range`.
const EXCHANGE_FIELDS: [&str; 13] = [
    "t1",
    "t2",
    "t3",
    "t4",
    "rtt",
    "range",
    "frames",
    "applied_k",
    "gain",
    "rssi",
    "ref_gain",
    "status",
    "seq",
];
const TIMESTAMP_FIELDS: [&str; 4] = ["t1", "t2", "t3", "t4"];

const ATTEN_COMMANDS: [&str; 2] = ["set_atten", "get_atten"];
const ATTEN_REPLIES: [&str; 1] = ["get_atten"];
const CONSOLE_COMMANDS: [&str; 3] = ["identify", "start_burst", "temperature"];
const CONSOLE_REPLIES: [&str; 8] = [
    "identify",
    "start_burst",
    "exchange",
    "burst_end",
    "burst_fail",
    "banner",
    "temperature",
    "missing",
];
const BURST_PARAMS: [(&str, ParamKind); 3] = [
    ("frames", ParamKind::Integer),
    ("center_mhz", ParamKind::Integer),
    ("bw_mhz", ParamKind::Integer),
];

impl DriverFile {
    /// Reads and validates `dir/NAME.toml`.
    pub fn load(dir: &Path, name: &str) -> Result<DriverFile, Diagnostic> {
        let path = dir.join(format!("{name}.toml"));
        let text = crate::text_file::read(&path).map_err(|e| {
            Diagnostic::in_file(&path, format!("cannot read driver file `{name}`: {e}"))
                .with_hint(format!(
                    "driver files live in {} (the bench's `drivers_dir`); the name is the file name without .toml",
                    dir.display()
                ))
        })?;
        DriverFile::parse(name, SourceFile::new(path, text))
    }

    /// Parses and validates driver-file text.
    pub fn parse(name: &str, source: SourceFile) -> Result<DriverFile, Diagnostic> {
        let raw: RawDriver = crate::toml_input::parse(&source)?;
        build(name, raw, source.path.parent())
            .map_err(|e| source.key_error(e))
            .map(|mut d| {
                d.source = source;
                d
            })
    }
}

fn build(name: &str, raw: RawDriver, dir: Option<&Path>) -> Result<DriverFile, KeyError> {
    let line_ending = match raw.link.line_ending.as_str() {
        "lf" => "\n",
        "crlf" => "\r\n",
        other => {
            return Err(KeyError::new(
                "link.line_ending",
                format!("`{other}` is not a line ending"),
                "write \"lf\" or \"crlf\"",
            ))
        }
    };
    let t = raw.link.timeout_ms;
    if !(t.is_finite() && (1.0..=600_000.0).contains(&t)) {
        return Err(KeyError::new(
            "link.timeout_ms",
            format!("{t} ms is not a usable timeout"),
            "give 1 to 600000 ms, e.g. 2000",
        ));
    }
    let link = LinkSettings {
        line_ending: line_ending.to_string(),
        timeout: Duration::from_micros((t * 1000.0) as u64),
    };
    if [KIND_ATTENUATOR, KIND_RANGING_CONSOLE].contains(&raw.driver.kind.as_str()) {
        chamber::refuse_elsewhere(&raw)?;
    }
    if let Some(key) = raw.command.runs.keys().next() {
        if raw.driver.kind != KIND_RANGING_CONSOLE {
            return Err(KeyError::new(
                format!("command.{key}"),
                format!("a program (`run`) stands in for {KIND_RANGING_CONSOLE} commands only"),
                "write this kind's commands as lines sent over its link",
            ));
        }
    }
    let kind = match raw.driver.kind.as_str() {
        KIND_CHAMBER => DriverKind::Chamber(Box::new(chamber::chamber(&raw)?)),
        KIND_ATTENUATOR => DriverKind::Attenuator(attenuator(&raw)?),
        KIND_RANGING_CONSOLE => DriverKind::RangingConsole(Box::new(console(&raw, dir)?)),
        other => {
            return Err(KeyError::new(
                "driver.kind",
                format!("`{other}` is not a kind of instrument taucal drives"),
                format!("kinds are {KIND_ATTENUATOR}, {KIND_RANGING_CONSOLE} and {KIND_CHAMBER}"),
            ))
        }
    };
    Ok(DriverFile {
        name: name.to_string(),
        source: SourceFile::new(name, ""),
        maker: raw.driver.maker,
        model: raw.driver.model,
        description: raw.driver.description,
        link,
        kind,
    })
}

fn only_keys<V>(table: &str, map: &BTreeMap<String, V>, allowed: &[&str]) -> Result<(), KeyError> {
    match map.keys().find(|k| !allowed.contains(&k.as_str())) {
        Some(k) => {
            let hint = did_you_mean(k, allowed.iter().copied())
                .map(|s| format!("did you mean `{s}`?"))
                .unwrap_or_else(|| format!("this kind's {table} keys are {}", allowed.join(", ")));
            Err(KeyError::new(
                format!("{table}.{k}"),
                "is not a key of this kind of driver",
                hint,
            ))
        }
        None => Ok(()),
    }
}

fn required<'a>(
    table: &str,
    map: &'a BTreeMap<String, String>,
    key: &str,
    example: &str,
) -> Result<&'a str, KeyError> {
    map.get(key).map(String::as_str).ok_or_else(|| {
        KeyError::new(
            table,
            format!("has no `{key}`"),
            format!("add `{key} = {example}`"),
        )
    })
}

fn template(
    table: &str,
    key: &str,
    text: &str,
    params: &[(&str, ParamKind)],
) -> Result<Template, KeyError> {
    Template::parse(text, params).map_err(|m| {
        KeyError::new(
            format!("{table}.{key}"),
            m,
            "placeholders are `{name}` or `{name:.N}`",
        )
    })
}

/// Compiles a reply pattern and checks it captures `needs` (and nothing unknown among `may`).
fn pattern(key: &str, text: &str, needs: &[&str], may: &[&str]) -> Result<Regex, KeyError> {
    let full = format!("reply.{key}");
    let re = Regex::new(text).map_err(|e| {
        KeyError::new(
            &full,
            format!("is not a regular expression: {e}"),
            "see the regex crate's syntax; name fields with (?P<name>…)",
        )
    })?;
    let names: Vec<&str> = re.capture_names().flatten().collect();
    if let Some(missing) = needs.iter().find(|n| !names.contains(n)) {
        return Err(KeyError::new(
            &full,
            format!("does not capture the field `{missing}`"),
            format!(
                "capture it with (?P<{missing}>…); this pattern must capture {}",
                needs.join(", ")
            ),
        ));
    }
    if let Some(unknown) = names
        .iter()
        .find(|n| !needs.contains(n) && !may.contains(n))
    {
        let mut known: Vec<&str> = needs.to_vec();
        known.extend_from_slice(may);
        return Err(KeyError::new(
            &full,
            format!("captures `{unknown}`, which taucal does not read"),
            if known.is_empty() {
                "this pattern captures nothing".to_string()
            } else {
                format!("fields here are {}", known.join(", "))
            },
        ));
    }
    Ok(re)
}

fn refuse(key: &str, kind: &str, present: bool) -> Result<(), KeyError> {
    if present {
        Err(KeyError::new(
            key,
            format!("does not apply to a {kind} driver"),
            "remove it",
        ))
    } else {
        Ok(())
    }
}

fn finite_non_negative(key: &str, v: f64, example: &str) -> Result<f64, KeyError> {
    if v.is_finite() && v >= 0.0 {
        Ok(v)
    } else {
        Err(KeyError::new(
            key,
            format!("{v} is negative or not finite"),
            format!("give a value ≥ 0, e.g. {example}"),
        ))
    }
}

fn attenuator(raw: &RawDriver) -> Result<AttenuatorDriver, KeyError> {
    only_keys("command", &raw.command, &ATTEN_COMMANDS)?;
    only_keys("reply", &raw.reply, &ATTEN_REPLIES)?;
    let l = &raw.limits;
    refuse("limits.frames", KIND_ATTENUATOR, l.frames.is_some())?;
    refuse("limits.center_mhz", KIND_ATTENUATOR, l.center_mhz.is_some())?;
    refuse("limits.bw_mhz", KIND_ATTENUATOR, l.bw_mhz.is_some())?;
    refuse("reports", KIND_ATTENUATOR, raw.reports.is_some())?;
    refuse(
        "safe_state.command",
        KIND_ATTENUATOR,
        raw.safe_state.command.is_some(),
    )?;
    refuse(
        "safe_state.reply",
        KIND_ATTENUATOR,
        raw.safe_state.reply.is_some(),
    )?;
    let Some(scpi) = &raw.scpi else {
        return Err(KeyError::new(
            "driver",
            "an attenuator driver needs a [scpi] table",
            "add [scpi] with wait_complete = true and error_queue = true",
        ));
    };
    let set_atten = template(
        "command",
        "set_atten",
        required(
            "command",
            &raw.command,
            "set_atten",
            "\"DAMP:SETT {db:.2}\"",
        )?,
        &[("db", ParamKind::Real), ("channel", ParamKind::Integer)],
    )?;
    let get_atten = template(
        "command",
        "get_atten",
        required("command", &raw.command, "get_atten", "\"DAMP:SETT?\"")?,
        &[("channel", ParamKind::Integer)],
    )?;
    let channels = l.channels.unwrap_or(1);
    if !(1..=64).contains(&channels) {
        return Err(KeyError::new(
            "limits.channels",
            format!("{channels} is not a channel count"),
            "give the attenuator's independent channels, 1 to 64",
        ));
    }
    // A multi-channel attenuator's command without its channel would set whichever channel
    // the instrument last chose: a slot's DUT could get another slot's (lower) setting.
    for (key, t) in [
        ("command.set_atten", &set_atten),
        ("command.get_atten", &get_atten),
    ] {
        if (channels > 1) != t.has_param("channel") {
            return Err(KeyError::new(
                key,
                if channels > 1 {
                    "does not name the channel, but the attenuator has several".to_string()
                } else {
                    "names `{channel}`, but limits.channels is 1".to_string()
                },
                "with limits.channels above 1 every command takes `{channel}`; without, none does",
            ));
        }
    }
    let get_atten_reply = pattern(
        "get_atten",
        required("reply", &raw.reply, "get_atten", "'^(?P<db>[-+0-9.eE]+)$'")?,
        &["db"],
        &[],
    )?;
    let Some([lo, hi]) = l.range_db else {
        return Err(KeyError::new(
            "limits",
            "has no `range_db`",
            "add `range_db = [lowest, highest]` in dB",
        ));
    };
    if !(lo.is_finite() && hi.is_finite() && lo >= 0.0 && lo < hi) {
        return Err(KeyError::new(
            "limits.range_db",
            format!("[{lo}, {hi}] is not a range"),
            "give [lowest, highest] in dB, lowest ≥ 0",
        ));
    }
    let step_db = l.step_db.ok_or_else(|| {
        KeyError::new(
            "limits",
            "has no `step_db`",
            "add the smallest step, e.g. `step_db = 0.25`",
        )
    })?;
    if !(step_db.is_finite() && step_db > 0.0 && step_db <= hi - lo) {
        return Err(KeyError::new(
            "limits.step_db",
            format!("{step_db} dB is not a usable step"),
            "give the smallest step, e.g. 0.25",
        ));
    }
    let max_input_dbm = l.max_input_dbm.filter(|v| v.is_finite()).ok_or_else(|| {
        KeyError::new(
            "limits",
            "has no finite `max_input_dbm`",
            "add the highest input power the attenuator takes without damage, from its data sheet",
        )
    })?;
    let settle_ms = finite_non_negative(
        "timing.settle_ms",
        raw.timing.settle_ms.unwrap_or(0.0),
        "5.0",
    )?;
    // Maximum attenuation unless the file says otherwise; a bench then checks that the
    // setting protects its receivers (`Bench::fits`).
    let safe_atten_db = raw.safe_state.atten_db.unwrap_or(hi);
    if !(safe_atten_db.is_finite()
        && (lo..=hi).contains(&safe_atten_db)
        && on_grid(safe_atten_db, lo, step_db))
    {
        return Err(KeyError::new(
            "safe_state.atten_db",
            format!(
                "{safe_atten_db} dB is not a setting of this attenuator (range_db and step_db)"
            ),
            format!("use the highest setting, {hi}, or leave the key out (that is the default)"),
        ));
    }
    if let Some(sent) = set_atten.misrendered("db", lo, hi, step_db) {
        return Err(KeyError::new(
            "command.set_atten",
            format!(
                "would send {} dB for the setting {} dB: its format has fewer decimals than the \
                 {step_db} dB grid needs",
                sent.1, sent.0
            ),
            "give `{db}` (exact) or `{db:.N}` with enough digits for step_db, e.g. `{db:.2}` for 0.25 dB; \
             what is sent must be what was checked against the receivers' limits",
        ));
    }
    Ok(AttenuatorDriver {
        set_atten,
        get_atten,
        get_atten_reply,
        wait_complete: scpi.wait_complete,
        error_queue: scpi.error_queue,
        range_db: [lo, hi],
        step_db,
        max_input_dbm,
        settle_ms,
        safe_atten_db,
        channels,
    })
}

/// A console command, as a line or a program; `None` where the file has neither.
fn command(
    raw: &RawCommands,
    key: &str,
    params: &[(&str, ParamKind)],
    dir: Option<&Path>,
) -> Result<Option<Command>, KeyError> {
    if let Some(line) = raw.lines.get(key) {
        return template("command", key, line, params).map(|t| Some(Command::Line(t)));
    }
    let Some(words) = raw.runs.get(key) else {
        return Ok(None);
    };
    RunCommand::parse(words, params, dir)
        .map(|r| Some(Command::Run(r)))
        .map_err(|m| {
            let offered: Vec<&str> = params.iter().map(|(n, _)| *n).collect();
            KeyError::new(
                format!("command.{key}"),
                m,
                if offered.is_empty() {
                    "give `{ run = [\"program\", \"arg\", …] }`; this command takes no parameters"
                        .to_string()
                } else {
                    format!(
                        "give `{{ run = [\"program\", \"arg\", …] }}`; an argument may hold {}",
                        offered
                            .iter()
                            .map(|n| format!("{{{n}}}"))
                            .collect::<Vec<_>>()
                            .join(", ")
                    )
                },
            )
        })
}

/// `command(…)` for a command the file must have.
fn required_command(
    raw: &RawCommands,
    key: &str,
    params: &[(&str, ParamKind)],
    dir: Option<&Path>,
    example: &str,
) -> Result<Command, KeyError> {
    command(raw, key, params, dir)?.ok_or_else(|| {
        KeyError::new(
            "command",
            format!("has no `{key}`"),
            format!("add `{key} = {example}`"),
        )
    })
}

fn console(raw: &RawDriver, dir: Option<&Path>) -> Result<ConsoleDriver, KeyError> {
    only_keys("command", &raw.command, &CONSOLE_COMMANDS)?;
    only_keys("command", &raw.command.runs, &CONSOLE_COMMANDS)?;
    only_keys("reply", &raw.reply, &CONSOLE_REPLIES)?;
    let l = &raw.limits;
    refuse("scpi", KIND_RANGING_CONSOLE, raw.scpi.is_some())?;
    refuse(
        "limits.channels",
        KIND_RANGING_CONSOLE,
        raw.limits.channels.is_some(),
    )?;
    refuse(
        "limits.range_db",
        KIND_RANGING_CONSOLE,
        l.range_db.is_some(),
    )?;
    refuse("limits.step_db", KIND_RANGING_CONSOLE, l.step_db.is_some())?;
    refuse(
        "safe_state.atten_db",
        KIND_RANGING_CONSOLE,
        raw.safe_state.atten_db.is_some(),
    )?;
    let c = &raw.command;
    let r = &raw.reply;
    let identify = required_command(c, "identify", &[], dir, "\"who\"")?;
    let identify_reply = pattern(
        "identify",
        required("reply", r, "identify", "'^id (?P<id>.+)$'")?,
        &["id"],
        &["serial"],
    )?;
    let start_burst = required_command(
        c,
        "start_burst",
        &BURST_PARAMS,
        dir,
        "\"start n={frames} f={center_mhz} bw={bw_mhz}\"",
    )?;
    let start_burst_reply = r
        .get("start_burst")
        .map(|p| pattern("start_burst", p, &[], &[]))
        .transpose()?;
    let exchange = pattern(
        "exchange",
        required(
            "reply",
            r,
            "exchange",
            "'^x t1=(?P<t1>\\d+) … g=(?P<gain>\\d+)$'",
        )?,
        &[],
        &EXCHANGE_FIELDS,
    )
    .map_err(|e| spread_hint(e, r.get("exchange")))?;
    let (range_unit, applied_k_ps) = forms(&exchange, raw.reports.as_ref())?;
    let burst_summary = exchange.capture_names().flatten().any(|n| n == "frames");
    let burst_end = pattern(
        "burst_end",
        required("reply", r, "burst_end", "'^done$'")?,
        &[],
        &["count"],
    )?;
    let burst_fail = pattern(
        "burst_fail",
        required("reply", r, "burst_fail", "'^fail (?P<reason>.*)$'")?,
        &[],
        &["reason"],
    )?;
    let banner = r
        .get("banner")
        .map(|p| pattern("banner", p, &[], &[]))
        .transpose()?;
    let temperature = match (command(c, "temperature", &[], dir)?, r.get("temperature")) {
        (None, None) => None,
        (Some(cmd), Some(reply)) => Some((cmd, pattern("temperature", reply, &["c"], &[])?)),
        (Some(_), None) => {
            return Err(KeyError::new(
                "command.temperature",
                "has no reply pattern",
                "add `reply.temperature` capturing (?P<c>…)",
            ))
        }
        (None, Some(_)) => {
            return Err(KeyError::new(
                "reply.temperature",
                "has no command",
                "add `command.temperature`",
            ))
        }
    };
    let missing = r.get("missing").cloned().unwrap_or_else(|| "-".into());
    let frames = l.frames.unwrap_or([1, 1024]);
    if frames[0] == 0 || frames[0] > frames[1] {
        return Err(KeyError::new(
            "limits.frames",
            format!("{frames:?} is not a range of burst sizes"),
            "give [fewest, most], fewest ≥ 1",
        ));
    }
    let center_mhz = l.center_mhz.ok_or_else(|| {
        KeyError::new(
            "limits",
            "has no `center_mhz`",
            "add `center_mhz = [lowest, highest]`, e.g. [2412, 7115]",
        )
    })?;
    if center_mhz[0] > center_mhz[1] {
        return Err(KeyError::new(
            "limits.center_mhz",
            format!("{center_mhz:?} is not a range"),
            "give [lowest, highest]",
        ));
    }
    let bw_mhz = l.bw_mhz.clone().filter(|b| !b.is_empty()).ok_or_else(|| {
        KeyError::new(
            "limits",
            "has no `bw_mhz`",
            "list the bandwidths the device ranges on, e.g. [20, 40, 80]",
        )
    })?;
    let max_input_dbm = l.max_input_dbm.filter(|v| v.is_finite()).ok_or_else(|| {
        KeyError::new(
            "limits",
            "has no finite `max_input_dbm`",
            "add the receiver's highest safe input level with a margin, from its data sheet",
        )
    })?;
    let Some(safe) = &raw.safe_state.command else {
        return Err(KeyError::new(
            "safe_state",
            "has no `command`",
            "add the command that stops ranging, e.g. `command = \"stop\"`",
        ));
    };
    let safe_command = template("safe_state", "command", safe, &[])?;
    let safe_reply = raw
        .safe_state
        .reply
        .as_deref()
        .map(|p| {
            Regex::new(p).map_err(|e| {
                KeyError::new(
                    "safe_state.reply",
                    format!("is not a regular expression: {e}"),
                    "see the regex crate's syntax",
                )
            })
        })
        .transpose()?;
    Ok(ConsoleDriver {
        identify,
        identify_reply,
        start_burst,
        start_burst_reply,
        exchange,
        range_unit,
        applied_k_ps,
        burst_summary,
        burst_end,
        burst_fail,
        banner,
        temperature,
        missing,
        frames,
        center_mhz,
        bw_mhz,
        max_input_dbm,
        safe_command,
        safe_reply,
    })
}

/// A pattern capturing a spread is refused with a hint of its own: the row has no place for it.
fn spread_hint(e: KeyError, text: Option<&String>) -> KeyError {
    let Some(re) = text.and_then(|t| Regex::new(t).ok()) else {
        return e;
    };
    match re
        .capture_names()
        .flatten()
        .find(|n| matches!(*n, "spread" | "sd"))
    {
        Some(name) => KeyError::new(
            "reply.exchange",
            format!("captures `{name}`, which a recorded row has no place for"),
            "match the spread without capturing it, e.g. `sd=[-+0-9.eE]+`; the interval comes \
             from the spread between bursts",
        ),
        None => e,
    }
}

/// Checks that the exchange pattern captures at least one complete form and that a distance
/// can be turned back into a round trip; returns the range unit and the declared applied K.
fn forms(
    exchange: &Regex,
    reports: Option<&RawReports>,
) -> Result<(Option<RangeUnit>, Option<f64>), KeyError> {
    let names: Vec<&str> = exchange.capture_names().flatten().collect();
    let has = |n: &str| names.contains(&n);
    let stamps: Vec<&str> = TIMESTAMP_FIELDS.into_iter().filter(|n| has(n)).collect();
    if !stamps.is_empty() && stamps.len() < TIMESTAMP_FIELDS.len() {
        let missing: Vec<&str> = TIMESTAMP_FIELDS.into_iter().filter(|n| !has(n)).collect();
        return Err(KeyError::new(
            "reply.exchange",
            format!(
                "captures {} but not {}",
                stamps.join(", "),
                missing.join(", ")
            ),
            "the timestamps form needs all of t1, t2, t3 and t4",
        ));
    }
    if stamps.is_empty() && !has("rtt") && !has("range") {
        return Err(KeyError::new(
            "reply.exchange",
            "captures no complete form of report",
            "capture t1, t2, t3 and t4 (raw timestamps), rtt (a round-trip time in ps) or range \
             (a distance, with [reports] range_unit)",
        ));
    }
    let declared = reports.map_or((None, None), |r| (r.range_unit.as_deref(), r.applied_k_ps));
    if !has("range") {
        let stray = [
            ("reports.range_unit", declared.0.is_some()),
            ("reports.applied_k_ps", declared.1.is_some()),
            ("reply.exchange", has("applied_k")),
        ];
        if let Some((key, _)) = stray.iter().find(|(_, present)| *present) {
            return Err(KeyError::new(
                *key,
                "applies only to a console that reports a distance",
                "capture (?P<range>…) in reply.exchange, or remove it",
            ));
        }
        return Ok((None, None));
    }
    let unit = match declared.0 {
        Some("mm") => RangeUnit::Mm,
        Some("cm") => RangeUnit::Cm,
        Some(other) => {
            return Err(KeyError::new(
                "reports.range_unit",
                format!("`{other}` is not a unit taucal reads distances in"),
                "write \"mm\" or \"cm\"",
            ))
        }
        None => {
            return Err(KeyError::new(
                "reply.exchange",
                "captures `range` but the driver does not say its unit",
                "add [reports] with range_unit = \"mm\" or \"cm\"",
            ))
        }
    };
    Ok((Some(unit), declared.1))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(text: &str) -> Result<DriverFile, Diagnostic> {
        DriverFile::parse("test", SourceFile::new("test.toml", text))
    }

    const SHIPPED: [(&str, &str); 5] = [
        (
            "brackwater-tidegate95",
            include_str!("../../drivers/brackwater-tidegate95.toml"),
        ),
        (
            "olvenmark-step8",
            include_str!("../../drivers/olvenmark-step8.toml"),
        ),
        (
            "wren6-console",
            include_str!("../../drivers/wren6-console.toml"),
        ),
        (
            "harrowdene-marlet40",
            include_str!("../../drivers/harrowdene-marlet40.toml"),
        ),
        (
            "fenwhistle-vellisk5",
            include_str!("../../drivers/fenwhistle-vellisk5.toml"),
        ),
    ];

    #[test]
    fn shipped_drivers_load() {
        for (name, text) in SHIPPED {
            let d = parse(text).unwrap_or_else(|e| panic!("{name}: {e}"));
            assert!(d.maker.contains("fictional"), "{name}");
        }
        let Ok(DriverFile {
            kind: DriverKind::Attenuator(a),
            ..
        }) = parse(SHIPPED[0].1)
        else {
            panic!("attenuator");
        };
        assert_eq!(a.range_db, [0.0, 95.0]);
        assert_eq!(a.safe_atten_db, 95.0);
        let caps = a.get_atten_reply.captures("17.25").expect("reply matches");
        assert_eq!(&caps["db"], "17.25");
    }

    #[test]
    fn a_multi_channel_attenuator_names_its_channel_in_every_command() {
        let text = include_str!("../../drivers/brindlecombe-fourfold90.toml");
        let Ok(DriverFile {
            kind: DriverKind::Attenuator(a),
            ..
        }) = parse(text)
        else {
            panic!("the four-channel driver loads");
        };
        assert_eq!(a.channels, 4);
        assert!(a.set_atten.has_param("channel") && a.get_atten.has_param("channel"));
        // Without its channel, a command would set whichever channel the instrument chose.
        for (from, to, key) in [
            ("{channel},{db:.2}", "{db:.2}", "command.set_atten"),
            ("? {channel}", "?", "command.get_atten"),
            ("channels = 4", "channels = 0", "limits.channels"),
            ("channels = 4", "channels = 1", "command.set_atten"),
        ] {
            let e = match parse(&text.replacen(from, to, 1)) {
                Ok(_) => panic!("`{to}` was accepted"),
                Err(d) => d.to_string(),
            };
            assert!(e.contains(key), "{key}: {e}");
        }
        // A single-channel driver may not name a channel, and a channel takes no format (it is
        // sent exactly, never rounded to another channel).
        let e = broken(
            0,
            "DAMPer:SETTing {db:.2}",
            "DAMPer:SETTing {channel},{db:.2}",
        );
        assert!(e.contains("limits.channels is 1"), "{e}");
        let e = parse(&text.replacen("{channel},{db:.2}", "{channel:.0},{db:.2}", 1))
            .err()
            .map(|d| d.to_string())
            .unwrap_or_default();
        assert!(e.contains("takes no format"), "{e}");
    }

    /// Replaces `from` by `to` in a shipped driver and parses it.
    fn broken(which: usize, from: &str, to: &str) -> String {
        let text = SHIPPED[which].1;
        assert!(text.contains(from), "{from}");
        match parse(&text.replacen(from, to, 1)) {
            Ok(_) => panic!("`{to}` was accepted"),
            Err(d) => d.to_string(),
        }
    }

    #[test]
    fn errors_name_the_key_and_its_line() {
        let e = broken(0, "DAMPer:SETTing {db:.2}", "DAMPer:SETTing {dB:.2}");
        assert!(e.contains("command.set_atten"), "{e}");
        assert!(e.contains("unknown parameter `dB`"), "{e}");
        assert!(e.contains("test.toml line 20, column 13:"), "{e}");
        let e = broken(0, "'^(?P<db>", "'^(?P<level>");
        assert!(e.contains("does not capture the field `db`"), "{e}");
        let e = broken(0, "'^(?P<db>", "'^((?P<db>");
        assert!(e.contains("not a regular expression"), "{e}");
        let e = broken(0, "kind = \"attenuator\"", "kind = \"oven\"");
        assert!(e.contains("not a kind of instrument"), "{e}");
        let e = broken(0, "set_atten =", "set_atten_db =");
        assert!(e.contains("did you mean `set_atten`"), "{e}");
        let e = broken(0, "atten_db = 95.0", "atten_db = 120.0");
        assert!(e.contains("not a setting of this attenuator"), "{e}");
        let e = broken(0, "max_input_dbm = 30.0", "max_input_dbm = nan");
        assert!(e.contains("max_input_dbm"), "{e}");
        let e = broken(0, "line_ending = \"lf\"", "line_ending = \"cr\"");
        assert!(e.contains("not a line ending"), "{e}");
        let e = broken(2, "(?P<gain>", "(?P<agc>");
        assert!(
            e.contains("captures `agc`, which taucal does not read"),
            "{e}"
        );
        let e = broken(2, "ch={center_mhz}", "ch={channel}");
        assert!(e.contains("offers frames, center_mhz, bw_mhz"), "{e}");
        let e = broken(2, "[safe_state]", "[safe_state]\natten_db = 95.0");
        assert!(
            e.contains("does not apply to a ranging-console driver"),
            "{e}"
        );
        let e = broken(2, "command = \"range halt\"", "");
        assert!(e.contains("safe_state"), "{e}");
    }

    /// The console driver in a shipped file.
    fn console_of(which: usize, edit: impl FnOnce(&str) -> String) -> ConsoleDriver {
        match parse(&edit(SHIPPED[which].1)) {
            Ok(DriverFile {
                kind: DriverKind::RangingConsole(c),
                ..
            }) => *c,
            Ok(_) => panic!("not a console"),
            Err(d) => panic!("{d}"),
        }
    }

    /// `test.toml line N` for the line of `SHIPPED[which]` that starts with `key`.
    fn line_of(which: usize, key: &str) -> String {
        let n = SHIPPED[which]
            .1
            .lines()
            .position(|l| l.starts_with(key))
            .expect("key in file");
        format!("test.toml line {}", n + 1)
    }

    #[test]
    fn an_exchange_pattern_may_capture_any_complete_form_and_gain_is_optional() {
        let wren = console_of(2, str::to_string);
        assert!(!wren.burst_summary);
        assert_eq!((wren.range_unit, wren.applied_k_ps), (None, None));
        let marlet = console_of(3, str::to_string);
        assert!(marlet.burst_summary);
        assert_eq!(marlet.range_unit, None);
        assert!(!marlet
            .exchange
            .capture_names()
            .flatten()
            .any(|n| n == "gain"));
        let vellisk = console_of(4, str::to_string);
        assert!(vellisk.burst_summary);
        assert_eq!(vellisk.range_unit, Some(RangeUnit::Mm));
        // Centimetres, and an applied K declared instead of reported.
        let cm = console_of(4, |t| {
            t.replace(
                "range_unit = \"mm\"",
                "range_unit = \"cm\"\napplied_k_ps = 2700.0",
            )
            .replace(" kapp_ps=(?P<applied_k>[-+0-9.eE]+|-)", "")
        });
        assert_eq!(cm.range_unit.map(RangeUnit::mm), Some(10.0));
        assert_eq!(cm.applied_k_ps, Some(2700.0));
    }

    #[test]
    fn exchange_patterns_without_a_complete_form_are_refused_at_their_line() {
        let at = line_of(3, "exchange =");
        let e = broken(3, "(?P<rtt>", "(?P<mean>");
        assert!(
            e.contains("captures `mean`, which taucal does not read"),
            "{e}"
        );
        let e = broken(3, "(?P<rtt>", "(?:");
        assert!(
            e.contains("`reply.exchange` captures no complete form of report"),
            "{e}"
        );
        assert!(e.contains(&at), "{e}");
        let e = broken(2, "t3=(?P<t3>", "t3=(?:");
        assert!(e.contains("captures t1, t2, t4 but not t3"), "{e}");
        let e = broken(3, "sd_ps=(?:", "sd_ps=(?P<sd>");
        assert!(
            e.contains("captures `sd`, which a recorded row has no place for"),
            "{e}"
        );
        assert!(e.contains(&at), "{e}");
        let e = broken(3, "sd_ps=(?:", "sd_ps=(?P<spread>");
        assert!(e.contains("captures `spread`"), "{e}");
    }

    #[test]
    fn a_range_form_needs_its_unit() {
        let at = line_of(4, "exchange =");
        let e = broken(4, "range_unit = \"mm\"", "");
        assert!(e.contains("does not say its unit"), "{e}");
        assert!(e.contains(&at), "{e}");
        let e = broken(4, "range_unit = \"mm\"", "range_unit = \"m\"");
        assert!(e.contains("`reports.range_unit` `m` is not a unit"), "{e}");
        assert!(e.contains(&line_of(4, "range_unit =")), "{e}");
        let e = broken(
            4,
            "range_unit = \"mm\"",
            "range_unit = \"mm\"\napplied_k_ps = nan",
        );
        assert!(
            e.contains("`reports.applied_k_ps` is `nan`, not a finite number"),
            "{e}"
        );
        let e = broken(
            3,
            "[limits]",
            "[reports]\napplied_k_ps = 2600.0\n\n[limits]",
        );
        assert!(
            e.contains("`reports.applied_k_ps` applies only to a console that reports a distance"),
            "{e}"
        );
        let e = broken(3, "st=(?P<status>", "k=(?P<applied_k>\\d+) st=(?P<status>");
        assert!(
            e.contains("`reply.exchange` applies only to a console that reports a distance"),
            "{e}"
        );
        let e = broken(0, "[scpi]", "[reports]\nrange_unit = \"mm\"\n\n[scpi]");
        assert!(e.contains("`reports` does not apply"), "{e}");
    }

    #[test]
    fn a_setting_format_coarser_than_the_grid_is_refused() {
        // Whole dB for a 0.25 dB grid: 0.25 would go out as "0", 17.25 as "17".
        let e = broken(0, "{db:.2}", "{db:.0}");
        assert!(e.contains("command.set_atten"), "{e}");
        assert!(e.contains("would send 0 dB for the setting 0.25 dB"), "{e}");
        let e = broken(0, "{db:.2}", "{db:.1}");
        assert!(e.contains("would send 0.2"), "{e}");
    }

    #[test]
    fn the_safe_state_is_a_setting_of_the_attenuator_and_maximum_by_default() {
        let e = broken(0, "atten_db = 95.0", "atten_db = 94.9");
        assert!(e.contains("not a setting of this attenuator"), "{e}");
        let text = SHIPPED[0].1;
        let line = text
            .lines()
            .find(|l| l.starts_with("atten_db ="))
            .expect("safe state line");
        let Ok(DriverFile {
            kind: DriverKind::Attenuator(a),
            ..
        }) = parse(&text.replacen(line, "", 1))
        else {
            panic!("attenuator without a safe-state setting");
        };
        assert_eq!(a.safe_atten_db, a.range_db[1]);
    }

    #[test]
    fn a_console_command_may_be_a_program_with_whole_argument_parameters() {
        let wren = console_of(2, |t| {
            t.replace(
                "start_burst = \"range go n={frames} ch={center_mhz} bw={bw_mhz}\"",
                "start_burst = { run = [\"./bin/burst\", \"--frames\", \"{frames}\", \"--ch={center_mhz}\"] }",
            )
            .replace("identify = \"who\"", "identify = { run = [\"wren-id\"] }")
        });
        let Command::Run(burst) = &wren.start_burst else {
            panic!("start_burst is a program");
        };
        let values = BTreeMap::from([
            ("frames", super::super::template::Value::Integer(16)),
            ("center_mhz", super::super::template::Value::Integer(5180)),
        ]);
        // Parsed from `test.toml`, whose folder is the current one.
        assert_eq!(
            burst.argv(&values),
            ["./bin/burst", "--frames", "16", "--ch=5180"]
        );
        assert!(matches!(wren.identify, Command::Run(_)));
        assert!(matches!(wren.temperature, Some((Command::Line(_), _))));
    }

    #[test]
    fn bad_program_commands_are_refused_at_their_line() {
        let start = "start_burst = \"range go n={frames} ch={center_mhz} bw={bw_mhz}\"";
        let at = line_of(2, "start_burst =");
        for (to, want) in [
            ("start_burst = { run = [] }", "names no program"),
            (
                "start_burst = { run = [\"{frames}\"] }",
                "the program is fixed",
            ),
            (
                "start_burst = { run = [\"t\", \"{chan}\"] }",
                "argument 1: `{chan}`: unknown parameter",
            ),
            (
                "start_burst = { run = [\"t\"], shell = true }",
                "a command's table holds `run` only",
            ),
            (
                "start_burst = { run = \"t --frames {frames}\" }",
                "expected",
            ),
            (
                "start_burst = 7",
                "a command line (text) or a program to run",
            ),
        ] {
            let e = broken(2, start, to);
            assert!(e.contains(want), "{to}: {e}");
            assert!(e.contains(&at), "{to}: {e}");
        }
        let e = broken(2, start, "start_burst = { run = [\"t\", \"{chan}\"] }");
        assert!(e.contains("command.start_burst"), "{e}");
        assert!(e.contains("{frames}, {center_mhz}, {bw_mhz}"), "{e}");
        let e = broken(
            0,
            "set_atten = \"DAMPer:SETTing {db:.2}\"",
            "set_atten = { run = [\"tool\", \"{db}\"] }",
        );
        assert!(e.contains("ranging-console commands only"), "{e}");
        let e = broken(
            2,
            "temperature = \"temp?\"",
            "temprature = { run = [\"t\"] }",
        );
        assert!(e.contains("did you mean `temperature`"), "{e}");
    }
}
