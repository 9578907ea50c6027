//! The chamber section of driver files: a climatic chamber described as data — how to set its
//! air setpoint, read its air (and, where it has a second sensor, the product) temperature,
//! identify it, and what its safe state is — so a SCPI-style chamber and a plain line-protocol
//! one are both a file, not a recompile.
//!
//! Validation only; nothing here talks to a chamber (`driven_chamber` does).

use super::{only_keys, pattern, refuse, required, template, RawDriver};
use crate::diagnostic::KeyError;
use crate::instrument::template::{ParamKind, Template};
use regex::Regex;

/// Kind name of a climatic-chamber driver.
pub const KIND_CHAMBER: &str = "chamber";

const COMMANDS: [&str; 4] = ["identify", "set_setpoint", "air", "product"];
const REPLIES: [&str; 5] = ["identify", "set_setpoint", "air", "product", "refused"];
const SETPOINT_PARAMS: [(&str, ParamKind); 1] = [("c", ParamKind::Real)];

/// Widest setpoint range a driver may declare: beyond it no chamber of this kind goes, so a
/// number outside is a typo (or kelvin).
pub const PLAUSIBLE_C: std::ops::RangeInclusive<f64> = -100.0..=300.0;

/// A climatic chamber: a line protocol (optionally with SCPI basics) defined by the file.
#[derive(Debug, Clone)]
pub struct ChamberDriver {
    /// Asks for the chamber's identity.
    pub identify: Template,
    /// Reply to `identify`; captures `id`.
    pub identify_reply: Regex,
    /// Sets the air setpoint; parameter `c` (°C).
    pub set_setpoint: Template,
    /// Acknowledgment of `set_setpoint`, if the chamber sends one.
    pub set_setpoint_reply: Option<Regex>,
    /// Asks for the air temperature.
    pub air: Template,
    /// Reply to `air`; captures `c` (°C).
    pub air_reply: Regex,
    /// Asks for the product (DUT) temperature, with its reply capturing `c`, where the chamber
    /// has a second sensor on the product.
    pub product: Option<(Template, Regex)>,
    /// A line the chamber sends instead of a reply when it refuses a command; may capture
    /// `reason`.
    pub refused: Option<Regex>,
    /// Ask `*OPC?` after each setting and wait for `1` (a SCPI-style chamber's `[scpi]`).
    pub wait_complete: bool,
    /// Drain `SYST:ERR?` after each setting; any error is a refusal.
    pub error_queue: bool,
    /// Lowest and highest setpoint the chamber is rated for, °C.
    pub setpoint_c: [f64; 2],
    /// What the chamber is left in when a run ends or stops.
    pub safe: ChamberSafe,
}

/// A chamber's safe state, as its driver file declares it.
#[derive(Debug, Clone)]
pub enum ChamberSafe {
    /// Hold the air at this setpoint (room temperature, typically): a controlled return to
    /// ambient, without the condensation on a product left in a chamber switched off cold.
    Hold {
        /// The setpoint held, °C.
        setpoint_c: f64,
    },
    /// Stop conditioning with this command (and its acknowledgment, if any).
    Stop {
        /// The command that stops the chamber.
        command: Template,
        /// Its acknowledgment.
        reply: Option<Regex>,
    },
}

/// Refuses the chamber's keys in a driver file of another kind.
pub(super) fn refuse_elsewhere(raw: &RawDriver) -> Result<(), KeyError> {
    for (key, present) in [
        ("limits.setpoint_c", raw.limits.setpoint_c.is_some()),
        ("safe_state.setpoint_c", raw.safe_state.setpoint_c.is_some()),
    ] {
        if present {
            return Err(KeyError::new(
                key,
                format!("applies only to a {KIND_CHAMBER} driver"),
                "remove it",
            ));
        }
    }
    Ok(())
}

/// Validates a chamber driver.
pub(super) fn chamber(raw: &RawDriver) -> Result<ChamberDriver, KeyError> {
    only_keys("command", &raw.command, &COMMANDS)?;
    only_keys("reply", &raw.reply, &REPLIES)?;
    let l = &raw.limits;
    for (key, present) in [
        ("limits.range_db", l.range_db.is_some()),
        ("limits.step_db", l.step_db.is_some()),
        ("limits.channels", l.channels.is_some()),
        ("limits.max_input_dbm", l.max_input_dbm.is_some()),
        ("limits.frames", l.frames.is_some()),
        ("limits.center_mhz", l.center_mhz.is_some()),
        ("limits.bw_mhz", l.bw_mhz.is_some()),
        ("reports", raw.reports.is_some()),
        ("timing.settle_ms", raw.timing.settle_ms.is_some()),
        ("safe_state.atten_db", raw.safe_state.atten_db.is_some()),
    ] {
        refuse(key, KIND_CHAMBER, present)?;
    }
    let c = &raw.command;
    let r = &raw.reply;
    let identify = template(
        "command",
        "identify",
        required("command", c, "identify", "\"*IDN?\"")?,
        &[],
    )?;
    let identify_reply = pattern(
        "identify",
        required("reply", r, "identify", "'^(?P<id>.+)$'")?,
        &["id"],
        &[],
    )?;
    let set_setpoint = template(
        "command",
        "set_setpoint",
        required("command", c, "set_setpoint", "\"TEMP:SETP {c:.1}\"")?,
        &SETPOINT_PARAMS,
    )?;
    if set_setpoint.as_sent("c", 0.0).is_none() {
        return Err(KeyError::new(
            "command.set_setpoint",
            "does not send the setpoint",
            "put the setpoint in the command with `{c}` or `{c:.N}`, e.g. \"TEMP:SETP {c:.1}\"",
        ));
    }
    let set_setpoint_reply = r
        .get("set_setpoint")
        .map(|p| pattern("set_setpoint", p, &[], &[]))
        .transpose()?;
    let air = template(
        "command",
        "air",
        required("command", c, "air", "\"TEMP:AIR?\"")?,
        &[],
    )?;
    let air_reply = pattern(
        "air",
        required("reply", r, "air", "'^(?P<c>[-+0-9.]+)$'")?,
        &["c"],
        &[],
    )?;
    let product =
        match (c.get("product"), r.get("product")) {
            (None, None) => None,
            (Some(cmd), Some(reply)) => Some((
                template("command", "product", cmd, &[])?,
                pattern("product", reply, &["c"], &[])?,
            )),
            (Some(_), None) => {
                return Err(KeyError::new(
                    "command.product",
                    "has no reply pattern",
                    "add `reply.product` capturing (?P<c>…)",
                ))
            }
            (None, Some(_)) => return Err(KeyError::new(
                "reply.product",
                "has no command",
                "add `command.product`, or remove the pattern if the chamber has no product sensor",
            )),
        };
    let refused = r
        .get("refused")
        .map(|p| pattern("refused", p, &[], &["reason"]))
        .transpose()?;
    let Some([lo, hi]) = l.setpoint_c else {
        return Err(KeyError::new(
            "limits",
            "has no `setpoint_c`",
            "add the chamber's rated setpoint range, `setpoint_c = [lowest, highest]` in °C",
        ));
    };
    if !(lo < hi && PLAUSIBLE_C.contains(&lo) && PLAUSIBLE_C.contains(&hi)) {
        return Err(KeyError::new(
            "limits.setpoint_c",
            format!("[{lo}, {hi}] is not a range of chamber setpoints"),
            format!(
                "give [lowest, highest] in °C, within {} to {} °C",
                PLAUSIBLE_C.start(),
                PLAUSIBLE_C.end()
            ),
        ));
    }
    let (wait_complete, error_queue) = raw
        .scpi
        .as_ref()
        .map_or((false, false), |s| (s.wait_complete, s.error_queue));
    let safe = safe_state(raw, [lo, hi])?;
    // A refusal line left unread after a command nobody waits on would be read as the next
    // query's reply: a chamber that refuses in lines must acknowledge its commands too.
    if refused.is_some() {
        if set_setpoint_reply.is_none() {
            return Err(KeyError::new(
                "reply.refused",
                "is given but `set_setpoint` has no acknowledgment to read in its place",
                "add `reply.set_setpoint` (e.g. '^ok$'): a chamber that answers a refusal with \
                 a line answers its settings too",
            ));
        }
        if let ChamberSafe::Stop { reply: None, .. } = safe {
            return Err(KeyError::new(
                "safe_state.command",
                "has no `reply`, but the chamber answers refusals with a line",
                "add the stop command's acknowledgment as `safe_state.reply`",
            ));
        }
    }
    Ok(ChamberDriver {
        identify,
        identify_reply,
        set_setpoint,
        set_setpoint_reply,
        air,
        air_reply,
        product,
        refused,
        wait_complete,
        error_queue,
        setpoint_c: [lo, hi],
        safe,
    })
}

/// Exactly one of a held setpoint (within the rated range) and a stop command.
fn safe_state(raw: &RawDriver, [lo, hi]: [f64; 2]) -> Result<ChamberSafe, KeyError> {
    let s = &raw.safe_state;
    let hint = "give either `setpoint_c = 23.0` (hold at room temperature) or \
                `command = \"…\"` (stop the chamber), whichever the chamber's maker recommends";
    match (s.setpoint_c, &s.command) {
        (Some(_), Some(_)) => Err(KeyError::new(
            "safe_state.command",
            "and `setpoint_c` both given: a chamber's safe state is one or the other",
            hint,
        )),
        (None, None) => Err(KeyError::new("safe_state", "says nothing", hint)),
        (Some(setpoint_c), None) => {
            if s.reply.is_some() {
                return Err(KeyError::new(
                    "safe_state.reply",
                    "applies only to a safe-state `command`",
                    "remove it: holding a setpoint is acknowledged as set_setpoint is",
                ));
            }
            if !(setpoint_c.is_finite() && (lo..=hi).contains(&setpoint_c)) {
                return Err(KeyError::new(
                    "safe_state.setpoint_c",
                    format!("{setpoint_c} °C is outside the chamber's setpoint range [{lo}, {hi}]"),
                    "hold at room temperature, e.g. 23.0",
                ));
            }
            Ok(ChamberSafe::Hold { setpoint_c })
        }
        (None, Some(command)) => Ok(ChamberSafe::Stop {
            command: template("safe_state", "command", command, &[])?,
            reply: s
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
                .transpose()?,
        }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::diagnostic::{Diagnostic, SourceFile};
    use crate::instrument::driver_file::{DriverFile, DriverKind};

    const COLDHEARTH: &str = include_str!("../../../drivers/tillowby-coldhearth60.toml");

    /// A SCPI-style chamber: IEEE 488.2 identity, a setting without a reply, `*OPC?` and the
    /// error queue after it, and a held setpoint as its safe state.
    const SCPI_STYLE: &str = r#"
[driver]
kind = "chamber"
maker = "Test (fictional)"
model = "S-1"

[link]
line_ending = "lf"
timeout_ms = 2000.0

[scpi]
wait_complete = true
error_queue = true

[command]
identify = "*IDN?"
set_setpoint = ":CLIMate:TEMPerature:TARGet {c:.2}"
air = ":CLIMate:TEMPerature:AIR?"

[reply]
identify = '^(?P<id>[^,]+,[^,]+,[^,]+,[^,]+)$'
air = '^(?P<c>[-+0-9.eE]+)$'

[limits]
setpoint_c = [-70.0, 180.0]

[safe_state]
setpoint_c = 23.0
"#;

    fn parse(text: &str) -> Result<DriverFile, Diagnostic> {
        DriverFile::parse("test", SourceFile::new("test.toml", text))
    }

    fn chamber_of(text: &str) -> ChamberDriver {
        match parse(text) {
            Ok(DriverFile {
                kind: DriverKind::Chamber(c),
                ..
            }) => *c,
            Ok(d) => panic!("a {} driver", d.kind.name()),
            Err(d) => panic!("{d}"),
        }
    }

    /// Replaces `from` by `to` in `text` and returns the error it gives.
    fn broken(text: &str, from: &str, to: &str) -> String {
        assert!(text.contains(from), "{from}");
        match parse(&text.replacen(from, to, 1)) {
            Ok(_) => panic!("`{to}` was accepted"),
            Err(d) => d.to_string(),
        }
    }

    /// `test.toml line N` for the line of `text` that starts with `key`.
    fn line_of(text: &str, key: &str) -> String {
        let n = text
            .lines()
            .position(|l| l.starts_with(key))
            .expect("key in file");
        format!("test.toml line {}", n + 1)
    }

    #[test]
    fn the_shipped_line_protocol_chamber_loads() {
        let d = parse(COLDHEARTH).expect("loads");
        assert!(d.maker.contains("fictional"));
        let c = chamber_of(COLDHEARTH);
        assert_eq!(c.setpoint_c, [-40.0, 150.0]);
        assert!(!c.wait_complete && !c.error_queue);
        assert_eq!(
            c.set_setpoint.render(&std::collections::BTreeMap::from([(
                "c",
                crate::instrument::template::Value::Real(-12.25)
            )])),
            "goal -12.2"
        );
        assert_eq!(&c.air_reply.captures("air -3.5").expect("air")["c"], "-3.5");
        let (command, reply) = c.product.expect("product sensor");
        assert_eq!(command.text(), "read load");
        assert_eq!(&reply.captures("load 41.0").expect("load")["c"], "41.0");
        let refused = c.refused.expect("refusal pattern");
        assert_eq!(
            &refused.captures("no door open").expect("no")["reason"],
            "door open"
        );
        match c.safe {
            ChamberSafe::Stop { command, reply } => {
                assert_eq!(command.text(), "rest");
                assert!(reply.expect("ack").is_match("ok"));
            }
            ChamberSafe::Hold { .. } => panic!("the Coldhearth stops"),
        }
    }

    #[test]
    fn a_scpi_style_chamber_holds_a_setpoint_as_its_safe_state() {
        let c = chamber_of(SCPI_STYLE);
        assert!(c.wait_complete && c.error_queue);
        assert!(c.set_setpoint_reply.is_none() && c.product.is_none());
        assert!(matches!(c.safe, ChamberSafe::Hold { setpoint_c } if setpoint_c == 23.0));
    }

    #[test]
    fn a_missing_or_empty_setpoint_command_is_refused_at_its_table() {
        let e = broken(COLDHEARTH, "set_setpoint = \"goal {c:.1}\"", "");
        assert!(e.contains("`command` has no `set_setpoint`"), "{e}");
        assert!(e.contains(&line_of(COLDHEARTH, "[command]")), "{e}");
        let e = broken(COLDHEARTH, "goal {c:.1}", "goal 25");
        assert!(e.contains("does not send the setpoint"), "{e}");
        assert!(e.contains(&line_of(COLDHEARTH, "set_setpoint =")), "{e}");
        let e = broken(COLDHEARTH, "goal {c:.1}", "goal {celsius}");
        assert!(
            e.contains("unknown parameter `celsius` (this command offers c)"),
            "{e}"
        );
        let e = broken(COLDHEARTH, "set_setpoint = ", "setpoint = ");
        assert!(e.contains("did you mean `set_setpoint`"), "{e}");
    }

    #[test]
    fn bad_reply_patterns_are_refused_at_their_line() {
        let e = broken(COLDHEARTH, "'^air (?P<c>", "'^air ((?P<c>");
        assert!(e.contains("`reply.air` is not a regular expression"), "{e}");
        assert!(e.contains(&line_of(COLDHEARTH, "air = '")), "{e}");
        let e = broken(COLDHEARTH, "'^air (?P<c>", "'^air (?P<temp>");
        assert!(e.contains("does not capture the field `c`"), "{e}");
        let e = broken(COLDHEARTH, "(?P<id>TILLOWBY", "(?P<name>TILLOWBY");
        assert!(
            e.contains("`reply.identify` does not capture the field `id`"),
            "{e}"
        );
        let e = broken(COLDHEARTH, "'^no (?P<reason>", "'^no (?P<why>");
        assert!(
            e.contains("captures `why`, which taucal does not read"),
            "{e}"
        );
        let e = broken(COLDHEARTH, "product = \"read load\"", "");
        assert!(e.contains("`reply.product` has no command"), "{e}");
        let e = broken(COLDHEARTH, "set_setpoint = '^ok$'", "");
        assert!(
            e.contains("`reply.refused` is given but `set_setpoint` has no"),
            "{e}"
        );
        assert!(e.contains(&line_of(COLDHEARTH, "refused =")), "{e}");
        let e = broken(COLDHEARTH, "reply = '^ok$'", "");
        assert!(e.contains("`safe_state.command` has no `reply`"), "{e}");
        let e = broken(COLDHEARTH, "reply = '^ok$'", "reply = '^(ok$'");
        assert!(
            e.contains("`safe_state.reply` is not a regular expression"),
            "{e}"
        );
    }

    #[test]
    fn the_safe_state_is_a_stop_or_a_held_setpoint_within_the_rated_range() {
        let e = broken(COLDHEARTH, "command = \"rest\"", "");
        assert!(e.contains("`safe_state` says nothing"), "{e}");
        let e = broken(
            COLDHEARTH,
            "command = \"rest\"",
            "command = \"rest\"\nsetpoint_c = 23.0",
        );
        assert!(
            e.contains("a chamber's safe state is one or the other"),
            "{e}"
        );
        let e = broken(SCPI_STYLE, "setpoint_c = 23.0", "setpoint_c = 200.0");
        assert!(
            e.contains("200 °C is outside the chamber's setpoint range [-70, 180]"),
            "{e}"
        );
        let e = broken(
            SCPI_STYLE,
            "setpoint_c = 23.0",
            "setpoint_c = 23.0\nreply = 'ok'",
        );
        assert!(e.contains("applies only to a safe-state `command`"), "{e}");
        let e = broken(COLDHEARTH, "[-40.0, 150.0]", "[150.0, -40.0]");
        assert!(e.contains("is not a range of chamber setpoints"), "{e}");
        let e = broken(COLDHEARTH, "[-40.0, 150.0]", "[233.0, 423.0]");
        assert!(e.contains("is not a range of chamber setpoints"), "{e}");
        let e = broken(COLDHEARTH, "setpoint_c = [-40.0, 150.0]", "");
        assert!(e.contains("`limits` has no `setpoint_c`"), "{e}");
    }

    #[test]
    fn keys_of_other_kinds_are_refused_and_chamber_keys_elsewhere_too() {
        let e = broken(COLDHEARTH, "[safe_state]", "[safe_state]\natten_db = 95.0");
        assert!(e.contains("does not apply to a chamber driver"), "{e}");
        let e = broken(
            COLDHEARTH,
            "setpoint_c = [-40.0, 150.0]",
            "setpoint_c = [-40.0, 150.0]\nframes = [1, 64]",
        );
        assert!(e.contains("`limits.frames` does not apply"), "{e}");
        let attenuator = include_str!("../../../drivers/brackwater-tidegate95.toml");
        let e = broken(
            attenuator,
            "[safe_state]",
            "[safe_state]\nsetpoint_c = 23.0",
        );
        assert!(
            e.contains("`safe_state.setpoint_c` applies only to a chamber driver"),
            "{e}"
        );
    }
}
