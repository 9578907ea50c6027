//! Bench files: which instrument plays which role, the path's delays and losses, the reference
//! unit's calibration, and (for a simulated bench) the simulation's truth.

pub mod certificate;
pub mod file;
pub mod measured_path;
pub mod path;
pub mod per_gain;
pub mod slot;
pub mod timing;
pub mod uncertainty;

pub use certificate::ReferenceCertificate;
pub use file::{AttenuatorFacts, Bench, ReferenceFacts, RoleBinding, UnitFacts};
pub use measured_path::{ChannelPath, MeasuredPath};
pub use path::PathFacts;
pub use per_gain::PerGain;
pub use slot::{SlotFacts, SlotOf};
pub use timing::TimingFacts;
pub use uncertainty::{BenchUncertainty, InputUncertainty};
