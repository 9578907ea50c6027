//! The population model as a TOML file (`fleet plan --out MODEL.toml`, read by a recipe's
//! `[fit] predict`): one `[[cell]]` per cell with its mean, measurement noise, whether the plan
//! measures it, and its row of the covariance.

use super::predict::PredictModel;
use crate::diagnostic::{Diagnostic, KeyError, SourceFile};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// The file as written.
#[derive(Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawModel {
    /// Every cell, in the covariance's order.
    cell: Vec<RawCell>,
}

/// `[[cell]]`.
#[derive(Debug, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCell {
    center_mhz: u32,
    bw_mhz: u32,
    gain_index: u32,
    /// True for the cells the plan measures.
    measure: bool,
    mean_ps: f64,
    noise_sd_ps: f64,
    /// This cell's row of the covariance of measured K across units, ps².
    cov_ps2: Vec<f64>,
}

/// The file's text for `model`, after a comment `header` (each line gets its `# `).
pub fn model_toml(model: &PredictModel, header: &str) -> String {
    let raw = RawModel {
        cell: model
            .cells
            .iter()
            .enumerate()
            .map(|(i, &(center_mhz, bw_mhz, gain_index))| RawCell {
                center_mhz,
                bw_mhz,
                gain_index,
                measure: model.measured.contains(&i),
                mean_ps: model.mean_ps[i],
                noise_sd_ps: model.noise_sd_ps[i],
                cov_ps2: model.cov_ps2[i].clone(),
            })
            .collect(),
    };
    let mut text: String = header.lines().map(|l| format!("# {l}\n")).collect();
    text.push('\n');
    // Plain data of our own types: serialising cannot fail.
    text.push_str(&toml::to_string(&raw).unwrap_or_default());
    text
}

/// Reads and checks the model at `path`.
pub fn read_model(path: &Path) -> Result<PredictModel, Diagnostic> {
    let text = crate::text_file::read(path)
        .map_err(|e| Diagnostic::in_file(path, format!("cannot read the population model: {e}")))?;
    let source = SourceFile::new(path, text);
    let raw: RawModel = crate::toml_input::parse(&source)?;
    check(&raw).map_err(|e| source.key_error(e))?;
    let n = raw.cell.len();
    Ok(PredictModel {
        cells: raw
            .cell
            .iter()
            .map(|c| (c.center_mhz, c.bw_mhz, c.gain_index))
            .collect(),
        mean_ps: raw.cell.iter().map(|c| c.mean_ps).collect(),
        cov_ps2: raw.cell.iter().map(|c| c.cov_ps2.clone()).collect(),
        noise_sd_ps: raw.cell.iter().map(|c| c.noise_sd_ps).collect(),
        measured: (0..n).filter(|&i| raw.cell[i].measure).collect(),
    })
}

fn check(raw: &RawModel) -> Result<(), KeyError> {
    let n = raw.cell.len();
    if n < 2 {
        return Err(KeyError::new(
            "cell",
            format!("{n} cells: a model predicts some cells from others"),
            "write the model with `taucal fleet plan --out`",
        ));
    }
    for (i, c) in raw.cell.iter().enumerate() {
        let at = |k: &str| format!("cell.{i}.{k}");
        if raw.cell[..i].iter().any(|o| {
            (o.center_mhz, o.bw_mhz, o.gain_index) == (c.center_mhz, c.bw_mhz, c.gain_index)
        }) {
            return Err(KeyError::new(
                at("gain_index"),
                "a cell listed twice",
                "list each (center_mhz, bw_mhz, gain_index) once",
            ));
        }
        // The TOML reader refuses nan and inf, so plain comparisons decide.
        if c.noise_sd_ps < 0.0 {
            return Err(KeyError::new(
                at("noise_sd_ps"),
                "negative",
                "give an SD ≥ 0 ps",
            ));
        }
        if c.cov_ps2.len() != n {
            return Err(KeyError::new(
                at("cov_ps2"),
                format!("{} entries for {n} cells", c.cov_ps2.len()),
                format!("give this cell's covariance with each of the {n} cells, in order"),
            ));
        }
        if c.cov_ps2[i] <= 0.0 {
            return Err(KeyError::new(
                at("cov_ps2"),
                format!("the cell's own variance, entry {i}, is not positive"),
                "a variance is > 0 ps²",
            ));
        }
        for (j, o) in raw.cell.iter().enumerate().take(i) {
            let (a, b) = (c.cov_ps2[j], o.cov_ps2[i]);
            if (a - b).abs() > 1e-6 * (a.abs() + b.abs()).max(1.0) {
                return Err(KeyError::new(
                    format!("{}.{j}", at("cov_ps2")),
                    format!("is {a}, but cell {j} gives {b} for the same pair: not symmetric"),
                    "a covariance matrix is symmetric",
                ));
            }
        }
    }
    if !raw.cell.iter().any(|c| c.measure) {
        return Err(KeyError::new(
            "cell",
            "no cell has `measure = true`",
            "mark the cells the recipe measures",
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_model_reads_back_as_written_and_a_bad_one_names_its_key() {
        let model = PredictModel {
            cells: vec![(5180, 80, 0), (5180, 80, 1)],
            mean_ps: vec![2400.5, 2650.25],
            cov_ps2: vec![vec![900.0, 700.0], vec![700.0, 1000.0]],
            noise_sd_ps: vec![20.0, 21.0],
            measured: vec![1],
        };
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("m.toml");
        std::fs::write(&path, model_toml(&model, "test model\nsecond line")).unwrap();
        assert_eq!(read_model(&path).unwrap(), model);

        let text = std::fs::read_to_string(&path)
            .unwrap()
            .replace("cov_ps2 = [700.0, 1000.0]", "cov_ps2 = [710.0, 1000.0]");
        std::fs::write(&path, text).unwrap();
        let e = read_model(&path).unwrap_err().to_string();
        assert!(
            e.contains("cell.1.cov_ps2.0") && e.contains("symmetric"),
            "{e}"
        );
    }
}
