//! Holding a device to one way of reporting for the whole run.
//!
//! A device that switches from timestamps to an RTT (a firmware reload, another tool answering)
//! or that changes the K it removes from its ranges makes the rows before and after mean
//! different things; fitting them together would give a table that is wrong without saying so.
//! The watch learns the form and the applied K from the first burst that shows them and refuses
//! any later burst that differs. Pure: the session records the burst first, so nothing is lost.

use crate::data::{DeviceExchange, STATUS_OK};
use std::fmt;

/// How a device reports one exchange or burst.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ReportForm {
    /// Raw t1…t4 per exchange.
    Timestamps,
    /// A round trip the device computed (per frame or per burst).
    Rtt,
    /// A distance with the device's applied K removed.
    Range,
}

impl ReportForm {
    /// The form of a completed report; `None` for one that carries no timing (lost, failed).
    pub fn of(x: &DeviceExchange) -> Option<ReportForm> {
        if x.status != STATUS_OK {
            return None;
        }
        if x.t1_ps.is_some() && x.t2_ps.is_some() && x.t3_ps.is_some() && x.t4_ps.is_some() {
            Some(ReportForm::Timestamps)
        } else if x.rtt_ps.is_some() {
            Some(ReportForm::Rtt)
        } else if x.range_mm.is_some() {
            Some(ReportForm::Range)
        } else {
            None
        }
    }
}

impl fmt::Display for ReportForm {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            ReportForm::Timestamps => "timestamps (t1…t4)",
            ReportForm::Rtt => "a round-trip time",
            ReportForm::Range => "a range",
        })
    }
}

/// What changed in the way a device reports.
#[derive(Debug, Clone, PartialEq)]
pub enum ReportChange {
    /// The device reported in another form than before.
    Form {
        /// The form of the run so far.
        was: ReportForm,
        /// The form now.
        now: ReportForm,
    },
    /// The device reported a different applied K.
    AppliedK {
        /// K reported so far, ps.
        was_ps: f64,
        /// K reported now, ps.
        now_ps: f64,
    },
}

impl fmt::Display for ReportChange {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ReportChange::Form { was, now } => write!(
                f,
                "the device reported {was} until now and {now} in this burst: rows of the two \
                 forms cannot be fitted as one device"
            ),
            ReportChange::AppliedK { was_ps, now_ps } => write!(
                f,
                "the device removed K = {was_ps} ps from its ranges until now and {now_ps} ps in \
                 this burst: ranges under two applied K cannot be fitted together"
            ),
        }
    }
}

/// The form and applied K a run's device has shown so far.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ReportWatch {
    form: Option<ReportForm>,
    applied_k_ps: Option<f64>,
}

impl ReportWatch {
    /// A watch that already knows the applied K (a resumed run's manifest).
    pub fn knowing_applied_k(applied_k_ps: Option<f64>) -> Self {
        ReportWatch {
            form: None,
            applied_k_ps,
        }
    }

    /// Takes one burst's reports: the first change from what earlier bursts showed is returned.
    pub fn observe(&mut self, burst: &[DeviceExchange]) -> Result<(), ReportChange> {
        for x in burst {
            if let Some(now) = ReportForm::of(x) {
                match self.form {
                    Some(was) if was != now => return Err(ReportChange::Form { was, now }),
                    _ => self.form = Some(now),
                }
            }
            if let Some(now_ps) = x.applied_k_ps {
                match self.applied_k_ps {
                    // Exact: a device reports the constant it holds, not a measurement.
                    Some(was_ps) if was_ps != now_ps => {
                        return Err(ReportChange::AppliedK { was_ps, now_ps })
                    }
                    _ => self.applied_k_ps = Some(now_ps),
                }
            }
        }
        Ok(())
    }

    /// The form seen so far.
    pub fn form(&self) -> Option<ReportForm> {
        self.form
    }

    /// The applied K the device reported (or a resumed run knew).
    pub fn applied_k_ps(&self) -> Option<f64> {
        self.applied_k_ps
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn stamps() -> DeviceExchange {
        DeviceExchange {
            t1_ps: Some(1),
            t2_ps: Some(2),
            t3_ps: Some(3),
            t4_ps: Some(4),
            ..DeviceExchange::empty(STATUS_OK)
        }
    }

    fn rtt(k: Option<f64>) -> DeviceExchange {
        DeviceExchange {
            rtt_ps: Some(20_000.0),
            applied_k_ps: k,
            ..DeviceExchange::empty(STATUS_OK)
        }
    }

    #[test]
    fn a_lost_frame_says_nothing_about_the_form() {
        let lost = DeviceExchange {
            t1_ps: Some(5),
            ..DeviceExchange::empty("lost")
        };
        let mut w = ReportWatch::default();
        assert_eq!(w.observe(&[lost, rtt(None)]), Ok(()));
        assert_eq!(w.form(), Some(ReportForm::Rtt));
    }

    #[test]
    fn a_change_of_form_is_named_with_both_forms() {
        let mut w = ReportWatch::default();
        w.observe(&[stamps(), stamps()]).unwrap();
        let e = w.observe(&[rtt(None)]).unwrap_err();
        assert_eq!(
            e,
            ReportChange::Form {
                was: ReportForm::Timestamps,
                now: ReportForm::Rtt
            }
        );
        let text = e.to_string();
        assert!(
            text.contains("timestamps") && text.contains("round-trip"),
            "{text}"
        );
    }

    #[test]
    fn the_applied_k_must_stay_what_it_was() {
        let mut w = ReportWatch::knowing_applied_k(Some(2400.0));
        assert_eq!(w.observe(&[rtt(Some(2400.0))]), Ok(()));
        assert_eq!(
            w.observe(&[rtt(Some(2400.0)), rtt(Some(2500.0))]),
            Err(ReportChange::AppliedK {
                was_ps: 2400.0,
                now_ps: 2500.0
            })
        );
        assert_eq!(w.applied_k_ps(), Some(2400.0));
    }
}
