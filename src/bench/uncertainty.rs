//! The standard uncertainties a bench states for its own path and for the reference unit's K
//! (GUM type B inputs of the budget, design §6).
//!
//! A value is given either plainly with a `*_u_ps` key beside it, or in the form a calibration
//! certificate prints it: `{ value_ps, expanded_ps, k }` (and `dof` when the certificate states
//! the effective degrees of freedom), from which u = expanded_ps / k (GUM 4.3.3).

use serde::de::{self, Deserializer};
use serde::Deserialize;

/// A key's value, plain or as a certificate states it.
#[derive(Debug, Clone, PartialEq)]
pub enum Stated<T> {
    /// The value alone (its uncertainty, if any, in a separate `*_u_ps` key).
    Plain(T),
    /// The value with its expanded uncertainty and coverage factor.
    Certificate(Certificate<T>),
}

/// `{ value_ps, expanded_ps, k, dof }`: a certificate's value and expanded uncertainty.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Certificate<T> {
    /// The certified value.
    pub value_ps: T,
    /// Its expanded uncertainty U.
    pub expanded_ps: f64,
    /// The coverage factor U was expanded with.
    pub k: f64,
    /// Effective degrees of freedom, when the certificate gives them (infinite otherwise).
    #[serde(default)]
    pub dof: Option<f64>,
}

impl<T: Clone> Stated<T> {
    /// The value, whichever form gave it.
    pub fn value(&self) -> T {
        match self {
            Stated::Plain(v) => v.clone(),
            Stated::Certificate(c) => c.value_ps.clone(),
        }
    }
}

impl<'de, T: de::DeserializeOwned> Deserialize<'de> for Stated<T> {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        // A table is the certificate form; anything else is the value itself.
        let value = toml::Value::deserialize(d)?;
        if value.is_table() {
            Certificate::deserialize(value)
                .map(Stated::Certificate)
                .map_err(|e| {
                    de::Error::custom(format!(
                        "{e}; the certificate form is {{ value_ps, expanded_ps, k }} (dof optional)"
                    ))
                })
        } else {
            T::deserialize(value)
                .map(Stated::Plain)
                .map_err(de::Error::custom)
        }
    }
}

/// How a standard uncertainty was stated.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum UncertaintyFrom {
    /// A standard uncertainty given directly (`*_u_ps`).
    Standard,
    /// An expanded uncertainty divided by its coverage factor (`expanded_ps`, `k`).
    Certificate {
        /// The expanded uncertainty.
        expanded_ps: f64,
        /// Its coverage factor.
        k: f64,
    },
}

/// One bench input's standard uncertainty and its degrees of freedom.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct InputUncertainty {
    /// Standard uncertainty, ps.
    pub u_ps: f64,
    /// Degrees of freedom (infinite unless a certificate states them).
    pub dof: f64,
    /// How it was stated.
    pub from: UncertaintyFrom,
}

/// Every bench input's uncertainty; `None` where the bench states none.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct BenchUncertainty {
    /// `[path] cable_delay_ps`: the one-way cable and fixture delay.
    pub cable: Option<InputUncertainty>,
    /// `[path] atten_delay_u_ps`: the attenuator's added one-way delay, at any setting used.
    pub atten: Option<InputUncertainty>,
    /// `[reference] delay_ps`: the reference unit's K, in every gain state.
    pub reference: Option<InputUncertainty>,
    /// `[path] touchstone`: the measured path, whose in-band ripple each channel's budget
    /// takes (`cable` and `atten` then hold `touchstone_u_ps`).
    pub measured: Option<std::sync::Arc<super::MeasuredPath>>,
}

/// A key whose uncertainty statement cannot be used: the key and why.
#[derive(Debug, Clone, PartialEq)]
pub struct BadStatement {
    /// The key as the file spells it, e.g. `path.cable_delay_u_ps`.
    pub key: String,
    /// What is wrong.
    pub problem: String,
    /// What would be right.
    pub hint: &'static str,
}

/// The uncertainty of one input from its value's form and its `*_u_ps` key.
/// `value_key` and `u_key` are the keys' full names, for messages.
pub fn input_uncertainty<T>(
    value: &Stated<T>,
    u_ps: Option<f64>,
    value_key: &str,
    u_key: &str,
) -> Result<Option<InputUncertainty>, BadStatement> {
    let bad = |key: &str, problem: String, hint| BadStatement {
        key: key.to_string(),
        problem,
        hint,
    };
    match (value, u_ps) {
        (Stated::Certificate(_), Some(_)) => Err(bad(
            u_key,
            format!("is given as well as the certificate form of {value_key}"),
            "state the uncertainty once: either the certificate's expanded_ps and k, or u_ps",
        )),
        (Stated::Plain(_), None) => Ok(None),
        (Stated::Plain(_), Some(u)) => {
            if !(u.is_finite() && u >= 0.0) {
                return Err(bad(
                    u_key,
                    format!("{u} is negative or not finite"),
                    "give a standard uncertainty in ps, ≥ 0",
                ));
            }
            Ok(Some(InputUncertainty {
                u_ps: u,
                dof: f64::INFINITY,
                from: UncertaintyFrom::Standard,
            }))
        }
        (Stated::Certificate(c), None) => {
            let key = |field: &str| format!("{value_key}.{field}");
            if !(c.expanded_ps.is_finite() && c.expanded_ps >= 0.0) {
                return Err(bad(
                    &key("expanded_ps"),
                    format!("{} is negative or not finite", c.expanded_ps),
                    "give the certificate's expanded uncertainty U in ps, ≥ 0",
                ));
            }
            if !(c.k.is_finite() && c.k > 0.0) {
                return Err(bad(
                    &key("k"),
                    format!("{} is not a coverage factor", c.k),
                    "give the certificate's coverage factor, > 0 (often 2)",
                ));
            }
            let dof = c.dof.unwrap_or(f64::INFINITY);
            if dof.is_nan() || dof < 1.0 {
                return Err(bad(
                    &key("dof"),
                    format!("{dof} is not a number of degrees of freedom"),
                    "give the certificate's effective degrees of freedom, ≥ 1, or leave dof out",
                ));
            }
            Ok(Some(InputUncertainty {
                u_ps: c.expanded_ps / c.k,
                dof,
                from: UncertaintyFrom::Certificate {
                    expanded_ps: c.expanded_ps,
                    k: c.k,
                },
            }))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cert(expanded_ps: f64, k: f64, dof: Option<f64>) -> Stated<f64> {
        Stated::Certificate(Certificate {
            value_ps: 6100.0,
            expanded_ps,
            k,
            dof,
        })
    }

    #[test]
    fn a_certificate_gives_expanded_over_k() {
        // GUM 4.3.3: a stated expanded uncertainty divided by its stated factor.
        let u = input_uncertainty(&cert(8.0, 2.0, None), None, "path.cable_delay_ps", "u");
        let u = u.ok().flatten();
        assert_eq!(u.map(|u| u.u_ps), Some(4.0));
        assert_eq!(u.map(|u| u.dof), Some(f64::INFINITY));
        let u = input_uncertainty(&cert(9.0, 3.0, Some(12.0)), None, "c", "u");
        assert_eq!(u.ok().flatten().map(|u| (u.u_ps, u.dof)), Some((3.0, 12.0)));
    }

    #[test]
    fn refuses_bad_statements_naming_the_key() {
        let key = |r: Result<Option<InputUncertainty>, BadStatement>| r.err().map(|e| e.key);
        assert_eq!(
            key(input_uncertainty(
                &cert(8.0, 0.0, None),
                None,
                "path.cable_delay_ps",
                "u"
            )),
            Some("path.cable_delay_ps.k".to_string())
        );
        assert_eq!(
            key(input_uncertainty(&cert(-1.0, 2.0, None), None, "r", "u")),
            Some("r.expanded_ps".to_string())
        );
        assert_eq!(
            key(input_uncertainty(
                &cert(1.0, 2.0, Some(0.5)),
                None,
                "r",
                "u"
            )),
            Some("r.dof".to_string())
        );
        assert_eq!(
            key(input_uncertainty(
                &Stated::Plain(1.0),
                Some(-2.0),
                "r",
                "r_u"
            )),
            Some("r_u".to_string())
        );
        assert_eq!(
            key(input_uncertainty(
                &cert(1.0, 2.0, None),
                Some(2.0),
                "r",
                "r_u"
            )),
            Some("r_u".to_string())
        );
        assert_eq!(
            input_uncertainty(&Stated::Plain(1.0), None, "r", "r_u"),
            Ok(None)
        );
    }
}
