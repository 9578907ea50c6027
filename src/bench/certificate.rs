//! A reference unit's calibration certificate as a file (`[reference] certificate`): its K per
//! gain index with the uncertainty the issuing lab states, the certificate's id, lab and dates.
//! The fitter subtracts the K; the budget takes its uncertainty (sensitivity 1); the manifest
//! and report record the id and due date, and a run after the due date warns or refuses.
//!
//! ```toml
//! [certificate]
//! id = "HVT-2026-0142"
//! lab = "Hollin Vale Timing Laboratory"
//! issued = 2026-02-10
//! due = 2027-02-10
//! unit = "REF-0007"            # optional: the unit's serial
//!
//! [calibration]
//! k_ps = [2800.0, 2950.0]       # K per gain index, or one number for every state
//! expanded_ps = [6.0, 8.0]      # U per gain index, or one number (or u_ps: standard)
//! coverage_factor = 2.0         # the k U was expanded with
//! dof = 40                      # optional: effective degrees of freedom (infinite if absent)
//! ```

use super::per_gain::PerGain;
use super::uncertainty::{InputUncertainty, UncertaintyFrom};
use crate::diagnostic::{Diagnostic, KeyError, SourceFile};
use serde::Deserialize;
use std::path::Path;
use time::{Date, Month};

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCertificateFile {
    certificate: RawIdentity,
    calibration: RawCalibration,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawIdentity {
    id: String,
    lab: String,
    issued: toml::value::Datetime,
    due: toml::value::Datetime,
    unit: Option<String>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCalibration {
    k_ps: PerGain,
    expanded_ps: Option<PerGain>,
    coverage_factor: Option<f64>,
    u_ps: Option<PerGain>,
    dof: Option<f64>,
}

/// A validated certificate.
#[derive(Debug, Clone, PartialEq)]
pub struct ReferenceCertificate {
    /// The certificate's number as the lab printed it.
    pub id: String,
    /// The issuing laboratory.
    pub lab: String,
    /// The unit's serial, when the certificate names it.
    pub unit: Option<String>,
    /// Date of issue.
    pub issued: Date,
    /// The last day the calibration is valid.
    pub due: Date,
    /// The certified K, constant or per the reference's gain index.
    pub k_ps: PerGain,
    /// Its standard uncertainty: the largest of the gain indices' (a cell's exchanges may be
    /// de-embedded with any of the reference's states, so the largest bounds them all).
    pub uncertainty: InputUncertainty,
    /// The file it was read from.
    pub path: std::path::PathBuf,
    /// SHA-256 of the file, hex.
    pub sha256: String,
}

impl ReferenceCertificate {
    /// True when `on` (the run's start date, UTC) is after the due date.
    pub fn overdue_on(&self, on: Date) -> bool {
        on > self.due
    }
}

/// The variable that stands in for the run's start date, so a due date can be rehearsed (and
/// tested) on any day.
pub const TODAY_VAR: &str = "TAUCAL_TODAY";

/// The date a run started on `start` is judged by: `start`'s UTC date, or the one
/// `TAUCAL_TODAY=YYYY-MM-DD` gives (the text back when it is not a date).
pub fn run_date(start: time::OffsetDateTime) -> Result<Date, String> {
    match std::env::var(TODAY_VAR) {
        Ok(text) => parse_date(&text).ok_or(text),
        Err(_) => Ok(start.to_offset(time::UtcOffset::UTC).date()),
    }
}

fn parse_date(text: &str) -> Option<Date> {
    let mut parts = text.trim().splitn(3, '-');
    let year: i32 = parts.next()?.parse().ok()?;
    let month: u8 = parts.next()?.parse().ok()?;
    let day: u8 = parts.next()?.parse().ok()?;
    Date::from_calendar_date(year, Month::try_from(month).ok()?, day).ok()
}

const DATE_HINT: &str = "write a TOML date, e.g. 2027-02-10";

fn date(key: &str, d: &toml::value::Datetime) -> Result<Date, KeyError> {
    let bad = |why: String| KeyError::new(key, why, DATE_HINT);
    let Some(day) = d.date else {
        return Err(bad(format!("`{d}` has no date")));
    };
    let month = Month::try_from(day.month).map_err(|e| bad(format!("`{d}`: {e}")))?;
    Date::from_calendar_date(i32::from(day.year), month, day.day)
        .map_err(|e| bad(format!("`{d}`: {e}")))
}

/// Reads a certificate file.
pub fn load(path: &Path) -> Result<ReferenceCertificate, Diagnostic> {
    let bytes = std::fs::read(path)
        .map_err(|e| Diagnostic::in_file(path, format!("cannot read the certificate file: {e}")))?;
    let source = SourceFile::new(path, String::from_utf8_lossy(&bytes).into_owned());
    let raw: RawCertificateFile = crate::toml_input::parse(&source)?;
    let mut c = validated(raw, crate::data::manifest::sha256_hex(&bytes))
        .map_err(|e| source.key_error(e))?;
    c.path = path.to_path_buf();
    Ok(c)
}

fn validated(raw: RawCertificateFile, sha256: String) -> Result<ReferenceCertificate, KeyError> {
    let id = &raw.certificate;
    for (key, v) in [("certificate.id", &id.id), ("certificate.lab", &id.lab)] {
        if v.trim().is_empty() {
            return Err(KeyError::new(
                key,
                "is empty",
                "copy it from the certificate as printed",
            ));
        }
    }
    let issued = date("certificate.issued", &id.issued)?;
    let due = date("certificate.due", &id.due)?;
    if due < issued {
        return Err(KeyError::new(
            "certificate.due",
            format!("{due} is before the issue date {issued}"),
            "the due date is when the calibration expires, after it was issued",
        ));
    }
    let c = &raw.calibration;
    if c.k_ps.values().iter().any(|v| !v.is_finite()) {
        return Err(KeyError::new(
            "calibration.k_ps",
            "is not finite",
            "give the certified K in ps",
        ));
    }
    let states = c.k_ps.states();
    let fits = |p: &PerGain| p.states() == 1 || p.states() == states;
    let (values, from, key) = match (&c.expanded_ps, c.coverage_factor, &c.u_ps) {
        (Some(u), Some(k), None) => {
            if !(k.is_finite() && k > 0.0) {
                return Err(KeyError::new(
                    "calibration.coverage_factor",
                    format!("{k} is not a coverage factor"),
                    "give the factor the lab expanded with, > 0 (often 2)",
                ));
            }
            let largest = u.values().iter().copied().fold(0.0, f64::max);
            (
                u,
                UncertaintyFrom::Certificate {
                    expanded_ps: largest,
                    k,
                },
                "calibration.expanded_ps",
            )
        }
        (None, None, Some(u)) => (u, UncertaintyFrom::Standard, "calibration.u_ps"),
        (Some(_), None, _) => {
            return Err(KeyError::new(
                "calibration.expanded_ps",
                "is given without its coverage_factor",
                "add coverage_factor = 2.0 (or the factor the certificate prints)",
            ))
        }
        _ => {
            return Err(KeyError::new(
                "calibration",
                "needs the K's uncertainty: expanded_ps with coverage_factor, or u_ps",
                "state it once, as the certificate prints it",
            ))
        }
    };
    if !fits(values) {
        return Err(KeyError::new(
            key,
            format!(
                "has {} values for k_ps's {states} gain indices",
                values.states()
            ),
            "give one value for every state, or one per gain index",
        ));
    }
    if values
        .values()
        .iter()
        .any(|v| !(v.is_finite() && *v >= 0.0))
    {
        return Err(KeyError::new(
            key,
            "holds a negative or non-finite value",
            "uncertainties are ≥ 0, in ps",
        ));
    }
    let dof = c.dof.unwrap_or(f64::INFINITY);
    if dof.is_nan() || dof < 1.0 {
        return Err(KeyError::new(
            "calibration.dof",
            format!("{dof} is not a number of degrees of freedom"),
            "give the effective degrees of freedom, ≥ 1, or leave dof out",
        ));
    }
    let largest = values.values().iter().copied().fold(0.0, f64::max);
    let u_ps = match from {
        UncertaintyFrom::Certificate { k, .. } => largest / k,
        UncertaintyFrom::Standard => largest,
    };
    Ok(ReferenceCertificate {
        id: id.id.trim().to_string(),
        lab: id.lab.trim().to_string(),
        unit: id.unit.clone(),
        issued,
        due,
        k_ps: c.k_ps.clone(),
        uncertainty: InputUncertainty { u_ps, dof, from },
        path: std::path::PathBuf::new(),
        sha256,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(text: &str) -> Result<ReferenceCertificate, KeyError> {
        let raw: RawCertificateFile = toml::from_str(text).expect("toml");
        validated(raw, String::new())
    }

    const GOOD: &str = "[certificate]\nid = \"X-1\"\nlab = \"Lab\"\nissued = 2026-02-10\ndue = 2027-02-10\n\n[calibration]\nk_ps = [2800.0, 2950.0]\nexpanded_ps = [6.0, 8.0]\ncoverage_factor = 2.0\ndof = 40\n";

    #[test]
    fn the_largest_expanded_uncertainty_over_its_factor() {
        // GUM 4.3.3: u = U / k; the larger of the two states' U bounds both.
        let c = parse(GOOD).expect("valid");
        assert_eq!(c.uncertainty.u_ps, 4.0);
        assert_eq!(c.uncertainty.dof, 40.0);
        assert_eq!(c.k_ps, PerGain::Each(vec![2800.0, 2950.0]));
        let due = Date::from_calendar_date(2027, Month::February, 10).expect("date");
        assert!(!c.overdue_on(due), "valid through its due date");
        assert!(c.overdue_on(due.next_day().expect("day")));
    }

    #[test]
    fn reads_iso_dates_only() {
        assert_eq!(
            parse_date("2027-02-28"),
            Date::from_calendar_date(2027, Month::February, 28).ok()
        );
        for bad in ["2027-02-30", "2027/02/01", "tomorrow", "2027-13-01"] {
            assert_eq!(parse_date(bad), None, "{bad}");
        }
    }

    #[test]
    fn bad_certificates_name_the_key() {
        for (from, to, key) in [
            ("due = 2027-02-10", "due = 2025-02-10", "certificate.due"),
            ("coverage_factor = 2.0\n", "", "calibration.expanded_ps"),
            (
                "expanded_ps = [6.0, 8.0]",
                "expanded_ps = [6.0, 8.0, 9.0]",
                "calibration.expanded_ps",
            ),
            (
                "coverage_factor = 2.0",
                "coverage_factor = 0.0",
                "calibration.coverage_factor",
            ),
            ("dof = 40", "dof = 0.5", "calibration.dof"),
            ("due = 2027-02-10", "due = 10:00:00", "certificate.due"),
        ] {
            let e = parse(&GOOD.replacen(from, to, 1)).expect_err(to);
            assert_eq!(e.key, key, "{to}: {}", e.message);
        }
    }
}
