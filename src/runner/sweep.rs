//! The declarative attenuation sweep stage.

use super::{RunError, Session};
use crate::recipe::Sweep;

/// Runs a sweep: at each point set the attenuation, settle, then run the bursts.
pub fn run_sweep(session: &mut Session, sweep: &Sweep) -> Result<(), RunError> {
    session.begin_stage(&sweep.name, sweep.channel);
    for (i, &db) in sweep.points_db.iter().enumerate() {
        tracing::debug!(stage = %sweep.name, point = i, atten_db = db, "point");
        session.set_atten(db)?;
        session.wait_ms(sweep.settle_ms);
        for _ in 0..sweep.bursts {
            session.burst(sweep.frames)?;
        }
    }
    Ok(())
}
