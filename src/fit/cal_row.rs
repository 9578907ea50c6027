//! One row of the calibration table, the fitter's output and the model's input: a cell's K,
//! its statistics, and whether it was measured, measured in inferred states, modelled, or
//! predicted from a population.

/// Where a calibration row's delay comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RowSource {
    /// Estimated from exchanges taken in that cell.
    Measured,
    /// Filled in by a model across cells.
    Modelled,
    /// Estimated from exchanges whose gain state the device did not report: the state was
    /// inferred from K's plateaus against receive level ([`crate::fit::infer_states`]).
    Inferred,
    /// Not measured: predicted from the unit's measured cells through a population model
    /// (`[fit] predict`, [`crate::fit::predict`]); its interval is a prediction interval.
    Predicted,
}

impl RowSource {
    /// The `source` column value of `caltable.csv`.
    pub fn as_str(self) -> &'static str {
        match self {
            RowSource::Measured => "measured",
            RowSource::Modelled => "modelled",
            RowSource::Inferred => "inferred",
            RowSource::Predicted => "predicted",
        }
    }

    /// The source a `source` column value names.
    pub fn parse(text: &str) -> Option<RowSource> {
        [
            RowSource::Measured,
            RowSource::Modelled,
            RowSource::Inferred,
            RowSource::Predicted,
        ]
        .into_iter()
        .find(|s| s.as_str() == text)
    }

    /// True for rows estimated from exchanges of their cell (measured or inferred), false for
    /// rows a model filled in or predicted.
    pub fn is_from_exchanges(self) -> bool {
        matches!(self, RowSource::Measured | RowSource::Inferred)
    }
}

/// One cell of the calibration table with the statistics behind it.
#[derive(Debug, Clone, PartialEq)]
pub struct CalRow {
    /// Channel center frequency.
    pub center_mhz: u32,
    /// Channel bandwidth.
    pub bw_mhz: u32,
    /// DUT receive gain state.
    pub gain_index: u32,
    /// The DUT's K (TX + RX delay): mean of the kept samples.
    pub delay_ps: f64,
    /// Half-width of the two-sided 95 % Student-t interval of `delay_ps`.
    pub ci95_ps: f64,
    /// Degrees of freedom of that interval (infinite for a normal quantile): with `ci95_ps`
    /// it gives the statistical standard uncertainty, the budget's type A component.
    pub stat_dof: f64,
    /// Samples kept.
    pub n_used: u64,
    /// Samples rejected as outliers.
    pub n_rejected: u64,
    /// Distinct bursts among the kept samples.
    pub n_bursts: u64,
    /// Sample standard deviation of the kept samples.
    pub sd_ps: f64,
    /// Measured or modelled.
    pub source: RowSource,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn source_labels_match_the_contract() {
        // Design §4 caltable.csv contract: `measured` or `modelled`; §6 adds `inferred`.
        assert_eq!(RowSource::Measured.as_str(), "measured");
        assert_eq!(RowSource::Modelled.as_str(), "modelled");
        assert_eq!(RowSource::Inferred.as_str(), "inferred");
        assert!(RowSource::Inferred.is_from_exchanges());
        assert!(!RowSource::Modelled.is_from_exchanges());
        assert_eq!(RowSource::Predicted.as_str(), "predicted");
        assert_eq!(RowSource::parse("predicted"), Some(RowSource::Predicted));
        assert!(!RowSource::Predicted.is_from_exchanges());
    }
}
