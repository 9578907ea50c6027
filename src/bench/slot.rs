//! DUT slots (`[[slot]]`): a production station tests several units at once, each in a shielded
//! slot of its own behind its own channel of a (multi-channel) attenuator, all against one
//! reference. A slot names the roles that play its DUT and its attenuator, and the channel.
//!
//! A run on a slotted bench runs each slot as a run of its own on the bench [`Bench::for_slot`]
//! gives: the slot's roles under the usual names `dut` and `attenuator`, and on a simulated
//! bench the slot's `[[sim.slot]]` truth as `[sim.dut]`. Everything else — levels, path,
//! reference, receiver protection — is the bench's, so each slot is protected exactly as a
//! one-DUT bench is.

use super::Bench;
use crate::diagnostic::KeyError;
use serde::Deserialize;
use std::collections::BTreeSet;

/// One `[[slot]]` table.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SlotFacts {
    /// The slot's name; its run directory is `slot-NAME/`.
    pub name: String,
    /// The role (under `[roles]`) of the slot's DUT.
    pub dut: String,
    /// The role of the attenuator in front of the slot's DUT.
    pub attenuator: String,
    /// The attenuator's channel for this slot, from 1 (a single-channel attenuator has only 1).
    #[serde(default = "first_channel")]
    pub channel: u32,
}

fn first_channel() -> u32 {
    1
}

/// Which slot a bench was narrowed to, by [`Bench::for_slot`].
#[derive(Debug, Clone, PartialEq)]
pub struct SlotOf {
    /// The slot's name.
    pub name: String,
    /// Its attenuator channel.
    pub channel: u32,
}

/// Most slots a bench may declare: a station holds a handful of shield boxes; more is a typo.
pub const MAX_SLOTS: usize = 64;

impl Bench {
    /// The role a bench role plays: `dut` or `attenuator` for roles that slots name, else the
    /// role's own name.
    pub fn role_kind<'a>(&self, role: &'a str) -> &'a str {
        if self.slots.iter().any(|s| s.attenuator == role) {
            "attenuator"
        } else if self.slots.iter().any(|s| s.dut == role) {
            "dut"
        } else {
            role
        }
    }

    /// True when the bench declares `[[slot]]` tables.
    pub fn is_slotted(&self) -> bool {
        !self.slots.is_empty()
    }

    /// The one-DUT bench of slot `index`: its DUT and attenuator roles bound as `dut` and
    /// `attenuator`, its channel remembered, and on a simulated bench its `[[sim.slot]]` truth
    /// as the DUT's (with its own faults, when it declares them).
    pub fn for_slot(&self, index: usize) -> Option<Bench> {
        let slot = self.slots.get(index)?;
        let mut bench = self.clone();
        bench.slots = Vec::new();
        bench.slot = Some(SlotOf {
            name: slot.name.clone(),
            channel: slot.channel,
        });
        bench.roles.retain(|role, _| role == "reference");
        bench.drivers.retain(|role, _| role == "reference");
        for (as_role, role) in [("dut", &slot.dut), ("attenuator", &slot.attenuator)] {
            if let Some(binding) = self.roles.get(role) {
                bench.roles.insert(as_role.to_string(), binding.clone());
            }
            if let Some(driver) = self.drivers.get(role) {
                bench.drivers.insert(as_role.to_string(), driver.clone());
            }
        }
        if let Some(sim) = bench.sim.as_mut() {
            if let Some(unit) = sim.slot.get(index) {
                let mut dut = unit.clone();
                if let Some(faults) = dut.faults.take() {
                    sim.faults = faults;
                }
                sim.dut = dut;
            }
            sim.slot = Vec::new();
        }
        bench.name = format!("{} / slot {}", self.name, slot.name);
        Some(bench)
    }

    /// Checks the `[[slot]]` tables against the roles and the simulation: names fit a folder,
    /// each DUT role in one slot only, each attenuator channel in one slot only, channels the
    /// attenuator has, and one `[[sim.slot]]` per slot on a simulated bench.
    pub(super) fn validate_slots(&self) -> Result<(), KeyError> {
        let sim_slots = self.sim.as_ref().map_or(0, |s| s.slot.len());
        if self.slots.is_empty() {
            if sim_slots > 0 {
                return Err(KeyError::new(
                    "sim.slot",
                    "describes slots the bench does not declare",
                    "add a [[slot]] table per [[sim.slot]], or remove [[sim.slot]]",
                ));
            }
            return Ok(());
        }
        if self.slots.len() > MAX_SLOTS {
            return Err(KeyError::new(
                "slot",
                format!("declares {} slots", self.slots.len()),
                format!("a bench holds at most {MAX_SLOTS} slots"),
            ));
        }
        if self.roles.contains_key("chamber") {
            return Err(KeyError::new(
                "roles.chamber",
                "a slotted bench cannot share one chamber between its slots' soaks",
                "remove the chamber role, or the [[slot]] tables",
            ));
        }
        let mut names = BTreeSet::new();
        let mut duts = BTreeSet::new();
        let mut channels = BTreeSet::new();
        for (i, slot) in self.slots.iter().enumerate() {
            let key = |k: &str| format!("slot.{i}.{k}");
            let good_name = !slot.name.is_empty()
                && slot.name.len() <= 40
                && slot
                    .name
                    .chars()
                    .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_');
            if !good_name {
                return Err(KeyError::new(
                    key("name"),
                    format!("`{}` cannot name a slot's folder", slot.name),
                    "use 1 to 40 letters, digits, `-` or `_`, e.g. \"a\" or \"box-1\"",
                ));
            }
            if !names.insert(slot.name.as_str()) {
                return Err(KeyError::new(
                    key("name"),
                    format!("`{}` names two slots", slot.name),
                    "give every slot a name of its own",
                ));
            }
            for (what, role) in [("dut", &slot.dut), ("attenuator", &slot.attenuator)] {
                if !self.roles.contains_key(role) {
                    return Err(KeyError::new(
                        key(what),
                        format!("names the role `{role}`, which [roles] does not have"),
                        format!(
                            "add `{role} = {{ driver = \"…\", address = \"…\" }}` under [roles]"
                        ),
                    ));
                }
            }
            if slot.dut == slot.attenuator || self.slots.iter().any(|s| s.attenuator == slot.dut) {
                return Err(KeyError::new(
                    key("dut"),
                    format!("`{}` is an attenuator role in a slot", slot.dut),
                    "a role plays one part: a DUT or an attenuator",
                ));
            }
            if ["reference", "chamber"].contains(&slot.dut.as_str())
                || ["reference", "chamber", "dut"].contains(&slot.attenuator.as_str())
            {
                return Err(KeyError::new(
                    key("dut"),
                    "names a role that cannot play this part",
                    "name the slot's own DUT and attenuator roles",
                ));
            }
            if !duts.insert(slot.dut.as_str()) {
                return Err(KeyError::new(
                    key("dut"),
                    format!("`{}` is the DUT of two slots", slot.dut),
                    "each slot holds a unit of its own: give it its own DUT role",
                ));
            }
            let most = self.channels_of(&slot.attenuator);
            if slot.channel == 0 || slot.channel > most {
                return Err(KeyError::new(
                    key("channel"),
                    format!(
                        "{} is not a channel of `{}`, which has {most}",
                        slot.channel, slot.attenuator
                    ),
                    format!("give a channel from 1 to {most}"),
                ));
            }
            // One channel in two slots would set one DUT's level from two runs at once: the
            // other slot's protection could not hold.
            if !channels.insert((slot.attenuator.as_str(), slot.channel)) {
                return Err(KeyError::new(
                    key("channel"),
                    format!(
                        "channel {} of `{}` already feeds another slot",
                        slot.channel, slot.attenuator
                    ),
                    "give every slot a channel of its own",
                ));
            }
        }
        if let Some(sim) = &self.sim {
            if sim_slots != self.slots.len() {
                return Err(KeyError::new(
                    "sim.slot",
                    format!("has {sim_slots} tables for {} slots", self.slots.len()),
                    "give one [[sim.slot]] (the slot's DUT truth, keys as [sim.dut]) per \
                     [[slot]], in the same order",
                ));
            }
            for (i, unit) in sim.slot.iter().enumerate() {
                let mut one = sim.clone();
                one.dut = unit.clone();
                if let Some(f) = one.dut.faults.take() {
                    one.faults = f;
                }
                one.slot = Vec::new();
                one.validate().map_err(|mut e| {
                    e.key = e
                        .key
                        .replacen("sim.dut", &format!("sim.slot.{i}"), 1)
                        .replacen("sim.faults", &format!("sim.slot.{i}.faults"), 1);
                    e
                })?;
            }
        }
        Ok(())
    }

    /// How many channels the attenuator role has: its driver file's `limits.channels`, one for
    /// a single-channel driver, and as many as slots use for the simulated attenuator.
    fn channels_of(&self, role: &str) -> u32 {
        match self.drivers.get(role).map(|d| &d.kind) {
            Some(crate::instrument::driver_file::DriverKind::Attenuator(a)) => a.channels,
            _ if self.roles.get(role).is_some_and(|r| r.address == "sim:") => MAX_SLOTS as u32,
            _ => 1,
        }
    }
}
