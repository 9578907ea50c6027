//! A bench path measured with a vector network analyser: Touchstone files (the IBIS Open
//! Forum's open format, versions 1.x and 2.0) read into S-parameters, and the group delay a
//! channel sees through them. Pure: text in, numbers out; the bench file names the files and
//! reads them.

pub mod group_delay;
pub mod parse;

pub use group_delay::{band_delay, point_delays_s, BandDelay};
pub use parse::{parse, Network, TouchstoneError};

/// A complex number, as the file's S-parameters are.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Complex {
    /// Real part.
    pub re: f64,
    /// Imaginary part.
    pub im: f64,
}

impl Complex {
    /// Its phase angle, radians in (−π, π].
    pub fn arg(self) -> f64 {
        self.im.atan2(self.re)
    }

    /// Its magnitude.
    pub fn abs(self) -> f64 {
        self.re.hypot(self.im)
    }
}
