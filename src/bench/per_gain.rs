//! A delay that is either one value for every gain state or one value per gain index.

use serde::de::{self, Deserializer, SeqAccess, Visitor};
use serde::Deserialize;
use std::fmt;

/// Delay in picoseconds, constant or keyed by gain index `0..N-1`.
#[derive(Debug, Clone, PartialEq)]
pub enum PerGain {
    /// The same delay whatever the gain state.
    Same(f64),
    /// One delay per gain index.
    Each(Vec<f64>),
}

impl PerGain {
    /// The delay at gain index `gain`; `None` when the table has no such index.
    /// An unreported gain state (`None`) is accepted only by a constant delay.
    pub fn at(&self, gain: Option<u32>) -> Option<f64> {
        match (self, gain) {
            (PerGain::Same(v), _) => Some(*v),
            (PerGain::Each(v), Some(g)) => v.get(g as usize).copied(),
            (PerGain::Each(_), None) => None,
        }
    }

    /// Number of gain states the table distinguishes (1 for a constant).
    pub fn states(&self) -> usize {
        match self {
            PerGain::Same(_) => 1,
            PerGain::Each(v) => v.len(),
        }
    }

    /// Every value, for range checks.
    pub fn values(&self) -> &[f64] {
        match self {
            PerGain::Same(v) => std::slice::from_ref(v),
            PerGain::Each(v) => v,
        }
    }
}

impl<'de> Deserialize<'de> for PerGain {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = PerGain;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a delay in ps, or an array of delays in ps, one per gain index")
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<PerGain, E> {
                Ok(PerGain::Same(v))
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<PerGain, E> {
                Ok(PerGain::Same(v as f64))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<PerGain, E> {
                Ok(PerGain::Same(v as f64))
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<PerGain, A::Error> {
                let mut out = Vec::new();
                while let Some(v) = seq.next_element::<f64>()? {
                    out.push(v);
                }
                if out.is_empty() {
                    return Err(de::Error::invalid_length(0, &self));
                }
                Ok(PerGain::Each(out))
            }
        }
        d.deserialize_any(V)
    }
}
