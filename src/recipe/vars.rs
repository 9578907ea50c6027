//! Recipe variables: `[vars]`, their overrides from `--set NAME=VALUE`, and `"$name"` references.

use crate::diagnostic::{did_you_mean, Diagnostic, KeyError};
use std::collections::BTreeMap;

/// Variables after overrides, by name.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Vars(pub BTreeMap<String, toml::Value>);

impl Vars {
    /// Applies one `NAME=VALUE` override. The variable must exist in `[vars]`, and the value
    /// keeps its type (an integer may be given where a float is declared).
    pub fn set(&mut self, assignment: &str) -> Result<(), Diagnostic> {
        let Some((name, text)) = assignment.split_once('=') else {
            return Err(
                Diagnostic::plain(format!("`--set {assignment}` has no `=`"))
                    .with_hint("write --set NAME=VALUE, e.g. --set bursts_per_point=8"),
            );
        };
        let name = name.trim();
        let text = text.trim();
        let Some(old) = self.0.get(name) else {
            let mut d = Diagnostic::plain(format!(
                "`--set {name}=…`: the recipe has no variable `{name}`"
            ));
            let known: Vec<&str> = self.0.keys().map(String::as_str).collect();
            d = match did_you_mean(name, known.iter().copied()) {
                Some(s) => d.with_hint(format!("did you mean `{s}`?")),
                None if known.is_empty() => d.with_hint("the recipe declares no [vars]"),
                None => d.with_hint(format!("the recipe's variables are: {}", known.join(", "))),
            };
            return Err(d);
        };
        let new = match old {
            toml::Value::Integer(_) => text.parse::<i64>().ok().map(toml::Value::Integer),
            toml::Value::Float(_) => text
                .parse::<f64>()
                .ok()
                .filter(|v| v.is_finite())
                .map(toml::Value::Float),
            toml::Value::Boolean(_) => text.parse::<bool>().ok().map(toml::Value::Boolean),
            toml::Value::String(_) => Some(toml::Value::String(text.to_string())),
            _ => None,
        };
        let Some(new) = new else {
            return Err(Diagnostic::plain(format!(
                "`--set {name}={text}`: `{text}` is not a valid {}",
                old.type_str()
            ))
            .with_hint(format!("`{name}` is declared as {old} in [vars]")));
        };
        self.0.insert(name.to_string(), new);
        Ok(())
    }

    /// A number at `key`: a literal, or `"$name"` naming a numeric variable.
    pub fn number(&self, key: &str, value: &toml::Value) -> Result<f64, KeyError> {
        match self.deref(key, value)? {
            toml::Value::Integer(i) => Ok(*i as f64),
            toml::Value::Float(f) if f.is_finite() => Ok(*f),
            toml::Value::Float(f) => Err(KeyError::new(
                key,
                format!("is {f}, not a finite number"),
                "give a finite number, or \"$name\" naming a numeric variable in [vars]",
            )),
            other => Err(KeyError::new(
                key,
                format!("is {}, not a number", describe(other)),
                "give a number, or \"$name\" naming a numeric variable in [vars]",
            )),
        }
    }

    /// A whole number within `min..=max` at `key`.
    pub fn count(
        &self,
        key: &str,
        value: &toml::Value,
        min: u32,
        max: u32,
    ) -> Result<u32, KeyError> {
        let v = self.number(key, value)?;
        if v.fract() != 0.0 || v < f64::from(min) || v > f64::from(max) {
            return Err(KeyError::new(
                key,
                format!("is {v}"),
                format!("give a whole number from {min} to {max}"),
            ));
        }
        Ok(v as u32)
    }

    /// Follows a `"$name"` reference; other values are returned as they are.
    pub fn deref<'a>(
        &'a self,
        key: &str,
        value: &'a toml::Value,
    ) -> Result<&'a toml::Value, KeyError> {
        let toml::Value::String(s) = value else {
            return Ok(value);
        };
        let Some(name) = s.strip_prefix('$') else {
            return Ok(value);
        };
        self.0.get(name).ok_or_else(|| {
            let hint = match did_you_mean(name, self.0.keys().map(String::as_str)) {
                Some(s) => format!("did you mean `${s}`?"),
                None => "declare it under [vars]".to_string(),
            };
            KeyError::new(
                key,
                format!("refers to `${name}`, which [vars] does not declare"),
                hint,
            )
        })
    }
}

fn describe(v: &toml::Value) -> String {
    match v {
        toml::Value::String(s) => format!("the string \"{s}\""),
        other => format!("a {}", other.type_str()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn vars() -> Vars {
        let mut m = BTreeMap::new();
        m.insert("bursts".to_string(), toml::Value::Integer(4));
        m.insert("step_db".to_string(), toml::Value::Float(2.0));
        Vars(m)
    }

    #[test]
    fn set_keeps_types_and_refuses_unknown_names() {
        let mut v = vars();
        v.set("bursts=8").expect("int");
        v.set("step_db=1").expect("float from int text");
        assert_eq!(v.0["bursts"], toml::Value::Integer(8));
        assert_eq!(v.0["step_db"], toml::Value::Float(1.0));
        let e = v.set("burst=3").unwrap_err();
        assert_eq!(e.hint.as_deref(), Some("did you mean `bursts`?"));
        assert!(v.set("bursts=2.5").is_err());
        assert!(v.set("bursts").is_err());
    }

    #[test]
    fn references_resolve_or_point_at_the_key() {
        let v = vars();
        let r = toml::Value::String("$bursts".into());
        assert_eq!(v.count("stage.0.bursts", &r, 1, 100), Ok(4));
        let bad = toml::Value::String("$burst".into());
        let e = v.number("stage.0.bursts", &bad).unwrap_err();
        assert_eq!(e.key, "stage.0.bursts");
        assert_eq!(e.hint, "did you mean `$bursts`?");
        assert!(v.count("k", &toml::Value::Integer(0), 1, 10).is_err());
    }
}
