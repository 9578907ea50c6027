//! The `cells` stage's keys, checked: a stage whose points follow the unit under test rather
//! than a golden sample. What it does at run time is `runner::cells`; here only the recipe's
//! values are validated, each error naming its key.

use super::plan::{
    allow_only, margin, measurement, points, positive, require, Adaptive, Channel, Points,
    ATTEN_HINT,
};
use super::raw::RawStage;
use super::vars::Vars;
use crate::bench::Bench;
use crate::diagnostic::KeyError;

/// Pilot bursts per point unless the recipe says: the pilot whose plan keeps the intervals'
/// coverage at 95 % in the tests (fewer make the planned count, and so the interval, less
/// honest).
pub const DEFAULT_PILOT_BURSTS: u32 = 10;

/// Most bursts per point unless the recipe says.
pub const DEFAULT_MAX_BURSTS: u32 = 1000;

/// Distance kept from each switch point unless the recipe says, dB (as a mid-plateau sweep).
pub const DEFAULT_MARGIN_DB: f64 = 2.0;

/// A stage whose points follow each unit's AGC: a short coarse map of receive level both ways
/// (to see where this unit switches, hysteresis included), one point in the middle of each
/// gain state's plateau, then bursts at each point until every cell its exchanges fall into
/// reaches the target.
#[derive(Debug, Clone, PartialEq)]
pub struct Cells {
    /// Stage name.
    pub name: String,
    /// Channel measured.
    pub channel: Channel,
    /// The coarse map's attenuations, ascending; swept rising, then falling.
    pub map_db: Vec<f64>,
    /// Bursts per map point and direction, of `frames` exchanges each (as the points' bursts:
    /// the map's exchanges count in the cells, and bursts of mixed sizes would make the
    /// burst-clustered interval cover less than it says).
    pub map_bursts: u32,
    /// Distance kept from each switch point, both directions; also how far a point whose
    /// exchanges fall into two states moves away from the switch.
    pub margin_db: f64,
    /// Pilot bursts at each point.
    pub bursts: u32,
    /// Exchanges per burst at the points.
    pub frames: u32,
    /// Wait after each attenuation change.
    pub settle_ms: f64,
    /// The target every cell is measured to, and the most bursts a point may take.
    pub adaptive: Adaptive,
}

/// Reads and checks a `cells` stage.
pub(super) fn cells(
    key: &str,
    st: &RawStage,
    vars: &Vars,
    bench: &Bench,
) -> Result<Cells, KeyError> {
    allow_only(
        key,
        "cells",
        st,
        &[
            "center_mhz",
            "bw_mhz",
            "map_db",
            "map_bursts",
            "margin_db",
            "bursts",
            "frames",
            "settle_ms",
            "target_ci95_ps",
            "max_bursts",
        ],
    )?;
    let map_key = format!("{key}.map_db");
    let map = require(key, "map_db", &st.map_db, ATTEN_HINT)?;
    let map_db = points(&map_key, map, vars, bench)?;
    if map_db.len() < 3 {
        return Err(KeyError::new(
            map_key,
            "has fewer than 3 points",
            "a map needs a range around the switch points: { from = 30.0, to = 70.0, step = 2.0 }",
        ));
    }
    if map_db.windows(2).any(|w| w[1] <= w[0]) {
        return Err(KeyError::new(
            map_key,
            "does not rise point by point",
            "list the map's attenuations in ascending order; it is swept rising, then falling",
        ));
    }
    // Channel, frames and settling as every measurement stage reads them.
    let common = measurement(key, st, vars, Points::Fixed(Vec::new()))?;
    let count = |name: &str, v: &Option<toml::Value>, min: u32, max: u32, default: u32| match v {
        Some(v) => vars.count(&format!("{key}.{name}"), v, min, max),
        None => Ok(default),
    };
    let map_bursts = count("map_bursts", &st.map_bursts, 1, 100, 1)?;
    // One burst has no between-burst spread, so an interval needs two.
    let bursts = count("bursts", &st.bursts, 2, 100_000, DEFAULT_PILOT_BURSTS)?;
    let margin_db = match &st.margin_db {
        Some(v) => margin(vars, &format!("{key}.margin_db"), v)?,
        None => DEFAULT_MARGIN_DB,
    };
    let target = require(
        key,
        "target_ci95_ps",
        &st.target_ci95_ps,
        "add target_ci95_ps = 50.0: every cell is measured until its 95 % half-width reaches it",
    )?;
    let target_ci95_ps = positive(vars, &format!("{key}.target_ci95_ps"), target)?;
    let max_bursts = count(
        "max_bursts",
        &st.max_bursts,
        1,
        100_000,
        DEFAULT_MAX_BURSTS.max(bursts),
    )?;
    if max_bursts < bursts {
        return Err(KeyError::new(
            format!("{key}.max_bursts"),
            format!("{max_bursts} is below the {bursts} pilot bursts every point starts with"),
            "max_bursts must be at least bursts",
        ));
    }
    Ok(Cells {
        name: st.name.clone(),
        channel: common.channel,
        map_db,
        map_bursts,
        margin_db,
        bursts,
        frames: common.frames,
        settle_ms: common.settle_ms,
        adaptive: Adaptive {
            target_ci95_ps,
            max_bursts,
        },
    })
}
