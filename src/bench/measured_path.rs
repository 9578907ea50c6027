//! A bench path measured with a vector network analyser: `[path] touchstone` (cables and
//! fixtures) and `[path] atten_touchstone` (the attenuator, one file per setting), read when the
//! bench is, and the delay each channel sees through them.
//!
//! A ranging exchange crosses the path once each way, so the round trip holds τ21 + τ12 (S21's
//! group delay one way, S12's the other), not 2·τ21: a passive path is reciprocal and the two
//! agree, but a measured file is used as measured. Each is the group delay averaged over the
//! channel's band (center ± bw/2), what a frame spread over that band sees.
//!
//! Between the attenuator's measured settings the nearest measured setting is used (ties go to
//! the lower): a step attenuator's delay changes with which pads are switched in, not smoothly
//! with the setting, so interpolating would invent values no state has.

use crate::data::manifest::sha256_hex;
use crate::diagnostic::KeyError;
use crate::touchstone::{band_delay, parse, Network};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// One Touchstone file a bench names.
#[derive(Debug)]
pub struct MeasuredFile {
    /// The bench key that names it, e.g. `path.touchstone`.
    pub key: String,
    /// The file, as resolved from the bench's folder.
    pub path: PathBuf,
    /// SHA-256 of its bytes, hex (the manifest records it).
    pub sha256: String,
    /// Its S-parameters.
    pub network: Network,
}

/// The group delays of one file over one channel's band.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WayDelays {
    /// S21's mean group delay over the band, ps.
    pub s21_ps: f64,
    /// S12's, ps.
    pub s12_ps: f64,
    /// The in-band ripple as a one-way standard uncertainty, ps: the mean of the two ways'
    /// rectangular ones (their ripples come from the same mismatches, so they move together).
    pub ripple_u_ps: f64,
}

impl WayDelays {
    /// τ21 + τ12: what the round trip holds.
    pub fn round_trip_ps(&self) -> f64 {
        self.s21_ps + self.s12_ps
    }
}

/// A channel (center, bandwidth, MHz) and its path.
pub type OnChannel = ((u32, u32), ChannelPath);

/// A channel's path: the cables' delays and the attenuator's at each measured setting.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelPath {
    /// Through `[path] touchstone`.
    pub cable: WayDelays,
    /// Through each `[path] atten_touchstone` file, by setting (dB), ascending.
    pub atten: Vec<(f64, WayDelays)>,
}

impl ChannelPath {
    /// The attenuator file's delays used at `atten_db`: the nearest measured setting.
    pub fn atten_at(&self, atten_db: f64) -> Option<&(f64, WayDelays)> {
        self.atten.iter().min_by(|a, b| {
            (a.0 - atten_db)
                .abs()
                .total_cmp(&(b.0 - atten_db).abs())
                .then(a.0.total_cmp(&b.0))
        })
    }

    /// Round-trip path delay with the attenuator at `atten_db`, ps.
    pub fn round_trip_ps(&self, atten_db: f64) -> f64 {
        self.cable.round_trip_ps() + self.atten_at(atten_db).map_or(0.0, |a| a.1.round_trip_ps())
    }

    /// The largest in-band ripple among the attenuator's files (a cell pools several settings),
    /// ps; 0 without attenuator files.
    pub fn atten_ripple_u_ps(&self) -> f64 {
        self.atten
            .iter()
            .map(|a| a.1.ripple_u_ps)
            .fold(0.0, f64::max)
    }
}

/// The measured path of a bench, with each channel's delays worked out once.
#[derive(Debug)]
pub struct MeasuredPath {
    /// Cables and fixtures.
    pub cable: MeasuredFile,
    /// The attenuator, by setting (dB), ascending; empty when the bench gives none.
    pub atten: Vec<(f64, MeasuredFile)>,
    memo: Mutex<BTreeMap<(u32, u32), Result<ChannelPath, KeyError>>>,
}

impl PartialEq for MeasuredPath {
    /// The same files, byte for byte.
    fn eq(&self, other: &Self) -> bool {
        self.cable.sha256 == other.cable.sha256
            && self.atten.len() == other.atten.len()
            && self
                .atten
                .iter()
                .zip(&other.atten)
                .all(|(a, b)| a.0 == b.0 && a.1.sha256 == b.1.sha256)
    }
}

const FILE_HINT: &str = "name a Touchstone two-port file (.s2p) of the path, measured over every \
                         channel the recipes use, relative to the bench file's folder";

/// Reads one file named by `key`, relative to `folder`.
pub fn read_file(folder: &Path, key: &str, name: &str) -> Result<MeasuredFile, KeyError> {
    let path = folder.join(name);
    let bytes = std::fs::read(&path).map_err(|e| {
        KeyError::new(
            key,
            format!("names `{}`, which cannot be read: {e}", path.display()),
            FILE_HINT,
        )
    })?;
    let text = String::from_utf8_lossy(&bytes);
    let lower = name.to_ascii_lowercase();
    // Version 1.x says its port count only in the name (.sNp).
    let ports = lower
        .rsplit_once(".s")
        .and_then(|(_, ext)| ext.strip_suffix('p'))
        .and_then(|n| n.parse::<usize>().ok());
    let network = parse(&text, ports).map_err(|e| {
        KeyError::new(
            key,
            format!("names `{name}`, which is not a usable Touchstone file: line {}: {}", e.line, e.message),
            "a Touchstone file: `# HZ|KHZ|MHZ|GHZ S RI|MA|DB R 50`, then rows of an increasing frequency and its S-parameters",
        )
    })?;
    if network.ports != 2 {
        return Err(KeyError::new(
            key,
            format!(
                "names `{name}`, a {}-port file; the path's delay needs its transmission both ways (S21 and S12)",
                network.ports
            ),
            "measure the path as a two-port and save it as .s2p",
        ));
    }
    Ok(MeasuredFile {
        key: key.to_string(),
        path,
        sha256: sha256_hex(&bytes),
        network,
    })
}

impl MeasuredPath {
    /// A path from its files (attenuator files in any order).
    pub fn new(cable: MeasuredFile, mut atten: Vec<(f64, MeasuredFile)>) -> Self {
        atten.sort_by(|a, b| a.0.total_cmp(&b.0));
        MeasuredPath {
            cable,
            atten,
            memo: Mutex::new(BTreeMap::new()),
        }
    }

    /// Every file, cables first.
    pub fn files(&self) -> impl Iterator<Item = &MeasuredFile> {
        std::iter::once(&self.cable).chain(self.atten.iter().map(|a| &a.1))
    }

    /// The delays of channel `center_mhz`/`bw_mhz`; an error names the file's key when the file
    /// does not cover the channel's band.
    pub fn channel(&self, center_mhz: u32, bw_mhz: u32) -> Result<ChannelPath, KeyError> {
        let mut memo = match self.memo.lock() {
            Ok(g) => g,
            Err(poisoned) => poisoned.into_inner(),
        };
        memo.entry((center_mhz, bw_mhz))
            .or_insert_with(|| self.work_out(center_mhz, bw_mhz))
            .clone()
    }

    /// The first channel asked for that the files do not cover, if any: a fit whose exchanges
    /// were on such a channel could not de-embed them.
    pub fn refused(&self) -> Option<KeyError> {
        let memo = match self.memo.lock() {
            Ok(g) => g,
            Err(poisoned) => poisoned.into_inner(),
        };
        memo.values().find_map(|r| r.as_ref().err().cloned())
    }

    fn work_out(&self, center_mhz: u32, bw_mhz: u32) -> Result<ChannelPath, KeyError> {
        let (c, b) = (f64::from(center_mhz), f64::from(bw_mhz));
        let (lo, hi) = ((c - b / 2.0) * 1e6, (c + b / 2.0) * 1e6);
        let ways = |file: &MeasuredFile| -> Result<WayDelays, KeyError> {
            let net = &file.network;
            let one = |to, from| {
                band_delay(&net.freq_hz, &net.sij(to, from), lo, hi).map_err(|why| {
                    KeyError::new(
                        file.key.clone(),
                        format!(
                            "cannot give channel {center_mhz}/{bw_mhz} MHz its delay from `{}`: {why}",
                            file.path.display()
                        ),
                        "measure the path over every channel the recipe uses (each channel's \
                         band is center ± bw/2)",
                    )
                })
            };
            let (s21, s12) = (one(2, 1)?, one(1, 2)?);
            Ok(WayDelays {
                s21_ps: s21.mean_s * 1e12,
                s12_ps: s12.mean_s * 1e12,
                ripple_u_ps: (s21.u_ripple_s + s12.u_ripple_s) / 2.0 * 1e12,
            })
        };
        Ok(ChannelPath {
            cable: ways(&self.cable)?,
            atten: self
                .atten
                .iter()
                .map(|(db, f)| Ok((*db, ways(f)?)))
                .collect::<Result<_, KeyError>>()?,
        })
    }
}

/// A file of an ideal line, 5.0–5.5 GHz, of one-way delays `tau21_ps` and `tau12_ps`.
#[cfg(test)]
pub(crate) fn test_line(key: &str, tau21_ps: f64, tau12_ps: f64) -> MeasuredFile {
    use crate::touchstone::Complex;
    let freq_hz: Vec<f64> = (0..=100).map(|k| 5.0e9 + 5e6 * f64::from(k)).collect();
    let at = |f: f64, tau_ps: f64| {
        let phi = -2.0 * std::f64::consts::PI * f * tau_ps * 1e-12;
        Complex {
            re: phi.cos(),
            im: phi.sin(),
        }
    };
    let s = freq_hz
        .iter()
        .map(|f| {
            let zero = Complex { re: 0.0, im: 0.0 };
            vec![zero, at(*f, tau12_ps), at(*f, tau21_ps), zero]
        })
        .collect();
    MeasuredFile {
        key: key.to_string(),
        path: PathBuf::from(format!("{key}.s2p")),
        sha256: key.to_string(),
        network: Network {
            ports: 2,
            freq_hz,
            s,
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_round_trip_is_both_ways_and_the_nearest_attenuator_setting() {
        let path = MeasuredPath::new(
            test_line("path.touchstone", 1000.0, 1010.0),
            vec![
                (30.0, test_line("path.atten_touchstone.30", 80.0, 80.0)),
                (0.0, test_line("path.atten_touchstone.0", 50.0, 50.0)),
            ],
        );
        let ch = path.channel(5200, 80).expect("inside the file");
        assert!((ch.cable.round_trip_ps() - 2010.0).abs() < 1e-6, "{ch:?}");
        assert!((ch.round_trip_ps(10.0) - 2110.0).abs() < 1e-6);
        // Equally far from both: the lower setting.
        assert!((ch.round_trip_ps(15.0) - 2110.0).abs() < 1e-6);
        assert!((ch.round_trip_ps(16.0) - 2170.0).abs() < 1e-6);
        assert!(ch.cable.ripple_u_ps < 1e-6);
        let e = path
            .channel(5480, 80)
            .expect_err("past the file's 5500 MHz");
        assert_eq!(e.key, "path.touchstone");
        assert!(e.message.contains("5480/80"), "{}", e.message);
        // Remembered, so a fit that met the channel can say so afterwards.
        assert_eq!(
            path.refused().map(|e| e.key),
            Some("path.touchstone".into())
        );
    }
}
