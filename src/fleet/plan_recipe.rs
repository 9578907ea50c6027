//! The reduced recipe of a plan: the full recipe with each sweep stage's points cut to those of
//! the gain states the plan measures, and `[fit] predict` naming the model.
//!
//! A sweep point's gain state is decided by the DUT at run time, not written in the recipe, so
//! this relies on the factory recipe's layout: one mid-plateau point per gain state of the
//! stage's channel, in gain order (as `recipes/factory-golden.toml` has). A stage whose point
//! count differs from the fleet's gain states on its channel is refused, not guessed at, and so
//! is a stage of another kind that measures cells (script, gainmap).

use crate::fit::predict::PredictModel;
use crate::recipe::raw::RawStage;
use std::collections::BTreeSet;
use toml::{Table, Value};

/// Why the recipe could not be reduced.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("`{key}` {message}")]
pub struct ReduceError {
    /// Dotted key in the full recipe.
    pub key: String,
    /// What does not fit.
    pub message: String,
}

fn err(key: impl Into<String>, message: impl Into<String>) -> ReduceError {
    ReduceError {
        key: key.into(),
        message: message.into(),
    }
}

/// `value`, or the `[vars]` entry it names as `"$name"`.
fn resolve<'a>(vars: Option<&'a Table>, value: &'a Value) -> Option<&'a Value> {
    match value.as_str().and_then(|s| s.strip_prefix('$')) {
        Some(name) => vars.and_then(|v| v.get(name)),
        None => Some(value),
    }
}

/// The reduced recipe's text from the full recipe's `full` text, the plan's `model`, and
/// `predict`, the model's path as the reduced recipe will name it.
pub fn reduce(full: &str, model: &PredictModel, predict: &str) -> Result<String, ReduceError> {
    let mut doc: Table = full
        .parse()
        .map_err(|e: toml::de::Error| err("recipe", format!("does not parse: {e}")))?;
    let vars = doc.get("vars").and_then(Value::as_table).cloned();
    let stages = doc
        .get("stage")
        .and_then(Value::as_array)
        .cloned()
        .unwrap_or_default();
    let mut kept = Vec::new();
    let mut states = BTreeSet::new();
    for (i, stage) in stages.into_iter().enumerate() {
        let key = format!("stage.{i}");
        let raw: RawStage = stage
            .clone()
            .try_into()
            .map_err(|e| err(&key, format!("is not a stage: {e}")))?;
        match raw.kind.as_str() {
            "sweep" => {}
            // Neither measures table cells: kept as they are.
            "verify" | "soak" => {
                kept.push(stage);
                continue;
            }
            other => {
                return Err(err(
                    format!("{key}.kind"),
                    format!("is \"{other}\": only sweep stages can be cut to the plan's cells"),
                ))
            }
        }
        let number = |name: &str, v: &Option<Value>| -> Result<u32, ReduceError> {
            v.as_ref()
                .and_then(|v| resolve(vars.as_ref(), v))
                .and_then(Value::as_integer)
                .and_then(|n| u32::try_from(n).ok())
                .ok_or_else(|| err(format!("{key}.{name}"), "is not a whole number of MHz"))
        };
        let channel = (
            number("center_mhz", &raw.center_mhz)?,
            number("bw_mhz", &raw.bw_mhz)?,
        );
        let points: Vec<Value> = raw
            .atten_db
            .as_ref()
            .and_then(|v| resolve(vars.as_ref(), v))
            .and_then(Value::as_array)
            .cloned()
            .ok_or_else(|| err(format!("{key}.atten_db"), "is not a list of points"))?;
        let gains: Vec<(usize, u32)> = model
            .cells
            .iter()
            .enumerate()
            .filter(|(_, c)| (c.0, c.1) == channel)
            .map(|(i, c)| (i, c.2))
            .collect();
        if gains.len() != points.len() {
            return Err(err(
                format!("{key}.atten_db"),
                format!(
                    "has {} points but the fleet has {} gain states on {} MHz / {} MHz; a reduced \
                     recipe needs one mid-plateau point per gain state, in gain order",
                    points.len(),
                    gains.len(),
                    channel.0,
                    channel.1
                ),
            ));
        }
        let chosen: Vec<Value> = gains
            .iter()
            .zip(points)
            .filter(|((i, _), _)| model.measured.contains(i))
            .map(|((_, g), p)| {
                states.insert(*g);
                p
            })
            .collect();
        if chosen.is_empty() {
            continue;
        }
        let mut stage = stage;
        if let Some(t) = stage.as_table_mut() {
            t.insert("atten_db".into(), Value::Array(chosen));
        }
        kept.push(stage);
    }
    doc.insert("stage".into(), Value::Array(kept));
    let fit = doc
        .entry("fit")
        .or_insert_with(|| Value::Table(Table::new()));
    if let Some(t) = fit.as_table_mut() {
        t.insert("predict".into(), Value::String(predict.into()));
    }
    if let Some(a) = doc.get_mut("accept").and_then(Value::as_table_mut) {
        if a.contains_key("min_gain_states") {
            a.insert(
                "min_gain_states".into(),
                Value::Integer(states.len() as i64),
            );
        }
    }
    if let Some(r) = doc.get_mut("recipe").and_then(Value::as_table_mut) {
        let name = r.get("name").and_then(Value::as_str).unwrap_or("recipe");
        let name = format!("{name}-reduced");
        r.insert("name".into(), Value::String(name));
        let description = format!(
            "{}; reduced: measures {} of {} cells, predicts the rest from {predict}",
            r.get("description").and_then(Value::as_str).unwrap_or(""),
            model.measured.len(),
            model.cells.len()
        );
        r.insert("description".into(), Value::String(description));
    }
    toml::to_string(&doc).map_err(|e| err("recipe", format!("cannot be written: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_the_measured_states_points_are_kept() {
        let full = "[recipe]\nname = \"fq\"\n[vars]\nc = 5180\n[accept]\nmin_gain_states = 3\n\
                    [[stage]]\nname = \"cal\"\nkind = \"sweep\"\ncenter_mhz = \"$c\"\nbw_mhz = 80\n\
                    atten_db = [27.0, 49.0, 75.0]\n";
        let model = PredictModel {
            cells: vec![(5180, 80, 0), (5180, 80, 1), (5180, 80, 2)],
            mean_ps: vec![0.0; 3],
            cov_ps2: vec![vec![1.0; 3]; 3],
            noise_sd_ps: vec![0.0; 3],
            measured: vec![1],
        };
        let out: Table = reduce(full, &model, "m.toml").unwrap().parse().unwrap();
        let stage = &out["stage"].as_array().unwrap()[0];
        assert_eq!(stage["atten_db"], Value::Array(vec![Value::Float(49.0)]));
        assert_eq!(out["fit"]["predict"].as_str(), Some("m.toml"));
        assert_eq!(out["accept"]["min_gain_states"].as_integer(), Some(1));
        assert_eq!(out["recipe"]["name"].as_str(), Some("fq-reduced"));

        let two = full.replace("[27.0, 49.0, 75.0]", "[27.0, 49.0]");
        let e = reduce(&two, &model, "m.toml").unwrap_err();
        assert_eq!(e.key, "stage.0.atten_db", "{e}");
    }
}
