//! The simulated climatic chamber served as a real one, in the line protocol
//! `drivers/tillowby-coldhearth60.toml` describes: `whoami`, `goal C`, `goal?`, `read air`,
//! `read load`, `rest`; every command answered by one line, `no REASON` when refused.
//!
//! The chamber is the bench model's own (`[sim.chamber]`), so the served DUT's temperature —
//! and with it its drift — follows it. Its air and product advance on the wall clock, not on
//! the server's instrument clock: a runner waits for a soak in wall time, and nothing the
//! runner sends while it waits would move an instrument clock forward. `[sim.faults]` strike
//! the attenuator and the DUT only. Parsing and answering are pure; [`serve`] moves lines.

use super::CommandReader;
use crate::sim::front::SimShared;
use std::sync::{Arc, Mutex};
use tokio::io::{AsyncRead, AsyncWrite, AsyncWriteExt};

/// Setpoints the simulated Coldhearth 60 accepts, °C (its driver file's `limits.setpoint_c`).
pub const SETPOINT_C: [f64; 2] = [-40.0, 150.0];

/// A chamber command.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ChamberCommand {
    /// `whoami`
    Identify,
    /// `goal C`
    SetGoal(f64),
    /// `goal?`
    Goal,
    /// `read air`
    Air,
    /// `read load`
    Load,
    /// `rest`
    Rest,
}

/// Parses a command line; `Err` carries the reply for a line that is not one.
pub fn parse_command(line: &str) -> Result<ChamberCommand, String> {
    let words: Vec<&str> = line.split_whitespace().collect();
    match words.as_slice() {
        ["whoami"] => Ok(ChamberCommand::Identify),
        ["goal?"] => Ok(ChamberCommand::Goal),
        ["goal", c] => {
            let c: f64 = c
                .parse()
                .ok()
                .filter(|c: &f64| c.is_finite())
                .ok_or("no goal is not a number")?;
            let [lo, hi] = SETPOINT_C;
            if (lo..=hi).contains(&c) {
                Ok(ChamberCommand::SetGoal(c))
            } else {
                Err(format!("no goal outside {lo}..{hi}"))
            }
        }
        ["read", "air"] => Ok(ChamberCommand::Air),
        ["read", "load"] => Ok(ChamberCommand::Load),
        ["rest"] => Ok(ChamberCommand::Rest),
        _ => Err("no such command".into()),
    }
}

/// A temperature as the chamber prints it: one decimal, its display's resolution.
fn degrees(c: f64) -> String {
    format!("{c:.1}")
}

/// The chamber's controller: whether it conditions the air or rests, and where rest leaves it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Controller {
    room_c: f64,
    resting: bool,
}

impl Controller {
    /// A controller at rest in a room at `room_c` (where the chamber's air stands at power-up).
    pub fn new(room_c: f64) -> Self {
        Controller {
            room_c,
            resting: true,
        }
    }

    /// Carries out `command` on the model's chamber; returns the reply line.
    pub fn execute(&mut self, command: ChamberCommand, shared: &SimShared) -> String {
        let outcome = shared.with_chamber(|chamber, now_ps| match command {
            ChamberCommand::Identify => format!(
                "TILLOWBY COLDHEARTH-60 SN SIM-0060 FW 4.2 (simulated by taucal {})",
                env!("CARGO_PKG_VERSION")
            ),
            ChamberCommand::SetGoal(c) => {
                chamber.set_setpoint_c(now_ps, c);
                self.resting = false;
                "ok".into()
            }
            ChamberCommand::Goal if self.resting => "goal rest".into(),
            ChamberCommand::Goal => format!("goal {}", degrees(chamber.setpoint_c())),
            ChamberCommand::Air => format!("air {}", degrees(chamber.air_c())),
            ChamberCommand::Load => format!("load {}", degrees(chamber.dut_c())),
            ChamberCommand::Rest => {
                // Without conditioning the air drifts back to the room: a setpoint at room
                // temperature is that drift.
                chamber.set_setpoint_c(now_ps, self.room_c);
                self.resting = true;
                "ok".into()
            }
        });
        outcome.unwrap_or_else(|e| format!("no {e}"))
    }
}

/// Serves the chamber's line protocol on `stream` until the client closes it.
pub async fn serve<S: AsyncRead + AsyncWrite + Unpin>(
    mut stream: S,
    shared: SimShared,
    controller: Arc<Mutex<Controller>>,
) -> std::io::Result<()> {
    let mut commands = CommandReader::default();
    while let Some(line) = commands.next(&mut stream).await? {
        let reply = match parse_command(&line) {
            Ok(command) => match controller.lock() {
                Ok(mut c) => c.execute(command, &shared),
                Err(_) => return Ok(()),
            },
            Err(refusal) => refusal,
        };
        stream.write_all(format!("{reply}\r\n").as_bytes()).await?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::Bench;
    use crate::clock::{BenchClock, ClockMode, PS_PER_S};
    use crate::sim::chamber::SimChamber;
    use crate::sim::front::SimWorld;
    use crate::sim::truth::SimChamberTruth;
    use crate::sim::SimBench;

    /// A served world whose chamber follows a virtual clock the test moves.
    fn world() -> (SimShared, Arc<BenchClock>) {
        let bench = Bench::built_in().expect("demo bench");
        let truth = bench.sim.as_ref().expect("sim");
        let model = SimBench::new(truth, &bench.path, 1).expect("model");
        let mut world = SimWorld::radios(model);
        world.chamber = Some(SimChamber::new(&SimChamberTruth {
            start_c: 25.0,
            ramp_c_per_min: 6.0,
            dut_tau_s: 60.0,
        }));
        let clock = Arc::new(BenchClock::new(ClockMode::Virtual));
        let shared = SimShared::new(world, Arc::new(BenchClock::new(ClockMode::Virtual)))
            .with_chamber_clock(clock.clone());
        (shared, clock)
    }

    fn say(c: &mut Controller, shared: &SimShared, line: &str) -> String {
        match parse_command(line) {
            Ok(command) => c.execute(command, shared),
            Err(refusal) => refusal,
        }
    }

    #[test]
    fn the_air_ramps_to_the_goal_and_the_load_lags_it() {
        let (shared, clock) = world();
        let mut c = Controller::new(25.0);
        assert_eq!(say(&mut c, &shared, "goal?"), "goal rest");
        assert_eq!(say(&mut c, &shared, "goal 45"), "ok");
        assert_eq!(say(&mut c, &shared, "goal?"), "goal 45.0");
        // 6 °C/min for 100 s: 10 °C of the 20 °C step.
        clock.spend(100 * PS_PER_S);
        assert_eq!(say(&mut c, &shared, "read air"), "air 35.0");
        let load: f64 = say(&mut c, &shared, "read load")[5..]
            .parse()
            .expect("number");
        assert!(load > 25.0 && load < 35.0, "{load}");
        // The DUT the console reports on is the chamber's load.
        assert_eq!(
            shared.dut_temp_c().expect("temp").map(degrees),
            Some(degrees(load))
        );
        clock.spend(3600 * PS_PER_S);
        assert_eq!(say(&mut c, &shared, "read load"), "load 45.0");
    }

    #[test]
    fn rest_returns_the_air_to_the_room_and_refusals_say_no() {
        let (shared, clock) = world();
        let mut c = Controller::new(23.0);
        say(&mut c, &shared, "goal -20");
        clock.spend(3600 * PS_PER_S);
        assert_eq!(say(&mut c, &shared, "read air"), "air -20.0");
        assert_eq!(say(&mut c, &shared, "rest"), "ok");
        assert_eq!(say(&mut c, &shared, "goal?"), "goal rest");
        clock.spend(3600 * PS_PER_S);
        assert_eq!(say(&mut c, &shared, "read air"), "air 23.0");
        assert_eq!(say(&mut c, &shared, "goal 151"), "no goal outside -40..150");
        assert_eq!(say(&mut c, &shared, "goal warm"), "no goal is not a number");
        assert_eq!(say(&mut c, &shared, "goal nan"), "no goal is not a number");
        assert_eq!(say(&mut c, &shared, "heat"), "no such command");
        assert!(say(&mut c, &shared, "whoami").starts_with("TILLOWBY COLDHEARTH-60 "));
    }
}
