//! The simulated step attenuator as a SCPI instrument, built on the `scpi` crate's parser and
//! command tree: the IEEE 488.2 mandatory common commands, the SCPI error queue with the
//! standard codes, and the setting commands of both shipped attenuator driver files
//! (`DAMPer:SETTing` and `LOSS[:LEVel]`), so either driver can be tried against it unchanged,
//! and on a slotted bench one channel per slot (`PATH:ATTenuation CHANNEL,DB`, the four-channel
//! driver's form), each channel in front of its own slot's simulated unit.
//!
//! Pure with respect to I/O: a message goes in, a response comes out; the server moves bytes.

use crate::clock::BenchClock;
use crate::instrument::template::on_grid;
use crate::instrument::InstrumentError;
use crate::sim::front::SimShared;
use scpi::error::{ErrorCode, ErrorQueue, VecErrorQueue};
use scpi::parser::format::Character;
use scpi::tree::prelude::*;
use std::time::Duration;

/// Errors kept before the queue overflows (IEEE 488.2 leaves the depth to the device).
pub const QUEUE_DEPTH: usize = 16;

/// ESR bit 0, Operation Complete (IEEE 488.2 §11.5.1.1).
const ESR_OPC: u8 = 0x01;
/// STB bit 2, error/event queue not empty (SCPI 1999 Vol 1 §9; IEEE 488.2 §11.2).
const STB_EAV: u8 = 0x04;
/// STB bit 5, Event Status Bit (IEEE 488.2 §11.2.1.2).
const STB_ESB: u8 = 0x20;
/// STB bit 6, Master Summary Status (IEEE 488.2 §11.2.1.3).
const STB_MSS: u8 = 0x40;

/// The served attenuator's state: the shared model plus IEEE 488.2 status registers.
pub struct ScpiAttenuator {
    shared: SimShared,
    /// Channels 2, 3, …: the other slots' models, on a slotted bench.
    more: Vec<SimShared>,
    identity: String,
    range_db: [f64; 2],
    step_db: f64,
    switch_ps: u64,
    errors: VecErrorQueue,
    esr: u8,
    ese: u8,
    sre: u8,
    pause: Duration,
}

impl Device for ScpiAttenuator {
    fn handle_error(&mut self, err: Error) {
        self.esr |= err.esr_mask();
        if self.errors.num_errors() >= QUEUE_DEPTH {
            // SCPI 1999 Vol 2 §21.8.6: the last entry is replaced by -350 Queue overflow.
            self.errors.pop();
            self.errors.push_back_error(ErrorCode::QueueOverflow.into());
        } else {
            self.errors.push_back_error(err);
        }
    }
}

impl ScpiAttenuator {
    /// An attenuator on `shared` with the bench's range and step. It powers up in its reset
    /// state, maximum attenuation, as a real one must.
    pub fn new(shared: SimShared, range_db: [f64; 2], step_db: f64, switch_ms: f64) -> Self {
        shared.power_up_atten_db(range_db[1]);
        ScpiAttenuator {
            shared,
            more: Vec::new(),
            identity: format!(
                "TAUCAL,SIM-STEP-ATTENUATOR,SIM0001,{}",
                env!("CARGO_PKG_VERSION")
            ),
            range_db,
            step_db,
            switch_ps: BenchClock::ms_to_ps(switch_ms),
            errors: VecErrorQueue::new(),
            esr: 0,
            ese: 0,
            sre: 0,
            pause: Duration::ZERO,
        }
    }

    /// Executes one program message; returns the response message (empty if none) and the wall
    /// time the server must wait before answering (a paced switch).
    pub fn execute(&mut self, message: &str) -> (Vec<u8>, Duration) {
        let mut response = Vec::new();
        let mut context = Context::new();
        if ROOT
            .run(message.as_bytes(), self, &mut context, &mut response)
            .is_err()
        {
            // IEEE 488.2 §6.3.2.3: after an error the message's remaining response is not sent.
            response.clear();
        }
        (response, std::mem::take(&mut self.pause))
    }

    /// The same attenuator with channels 2, 3, … in front of the models `more` (each powers up
    /// at maximum attenuation, as channel 1 does).
    pub fn with_channels(mut self, more: Vec<SimShared>) -> Self {
        for m in &more {
            m.power_up_atten_db(self.range_db[1]);
        }
        self.more = more;
        self
    }

    /// The model behind channel `n` (from 1).
    fn channel(&self, n: u32) -> Result<&SimShared, Error> {
        match n {
            1 => Ok(&self.shared),
            n => self
                .more
                .get((n as usize).wrapping_sub(2))
                .ok_or_else(|| ErrorCode::IllegalParameterValue.into()),
        }
    }

    fn set_on(&mut self, channel: u32, db: f64) -> Result<(), Error> {
        let [lo, hi] = self.range_db;
        if !db.is_finite() || db < lo - 1e-9 || db > hi + 1e-9 {
            return Err(ErrorCode::DataOutOfRange.into());
        }
        if !on_grid(db, lo, self.step_db) {
            return Err(ErrorCode::IllegalParameterValue.into());
        }
        let wall = self
            .channel(channel)?
            .set_atten_db(db, self.switch_ps)
            .map_err(|_: InstrumentError| Error::new(ErrorCode::DeviceSpecificError))?;
        self.pause += wall;
        Ok(())
    }

    fn stb(&self) -> u8 {
        let mut stb = 0;
        if !self.errors.is_empty() {
            stb |= STB_EAV;
        }
        if self.esr & self.ese != 0 {
            stb |= STB_ESB;
        }
        if stb & self.sre & !STB_MSS != 0 {
            stb |= STB_MSS;
        }
        stb
    }
}

struct Idn;
impl Command<ScpiAttenuator> for Idn {
    fn query(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        _: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        r.data(Character(d.identity.as_bytes())).finish()
    }
}

struct Rst;
impl Command<ScpiAttenuator> for Rst {
    fn event(&self, d: &mut ScpiAttenuator, _: &mut Context, _: Parameters) -> Result<(), Error> {
        // The reset state is the safe state: maximum attenuation, on every channel.
        for n in 1..=1 + d.more.len() as u32 {
            d.set_on(n, d.range_db[1])?;
        }
        Ok(())
    }
}

struct Cls;
impl Command<ScpiAttenuator> for Cls {
    fn event(&self, d: &mut ScpiAttenuator, _: &mut Context, _: Parameters) -> Result<(), Error> {
        d.errors.clear_errors();
        d.esr = 0;
        Ok(())
    }
}

struct Ese;
impl Command<ScpiAttenuator> for Ese {
    fn event(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        mut p: Parameters,
    ) -> Result<(), Error> {
        d.ese = p.next_data::<u8>()?;
        Ok(())
    }
    fn query(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        _: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        r.data(d.ese).finish()
    }
}

struct Esr;
impl Command<ScpiAttenuator> for Esr {
    fn query(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        _: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        let esr = std::mem::take(&mut d.esr);
        r.data(esr).finish()
    }
}

struct Opc;
impl Command<ScpiAttenuator> for Opc {
    fn event(&self, d: &mut ScpiAttenuator, _: &mut Context, _: Parameters) -> Result<(), Error> {
        // Every operation completes before the next message is read (no overlapped commands).
        d.esr |= ESR_OPC;
        Ok(())
    }
    fn query(
        &self,
        _: &mut ScpiAttenuator,
        _: &mut Context,
        _: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        r.data(1u8).finish()
    }
}

struct Sre;
impl Command<ScpiAttenuator> for Sre {
    fn event(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        mut p: Parameters,
    ) -> Result<(), Error> {
        d.sre = p.next_data::<u8>()? & !STB_MSS;
        Ok(())
    }
    fn query(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        _: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        r.data(d.sre).finish()
    }
}

struct Stb;
impl Command<ScpiAttenuator> for Stb {
    fn query(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        _: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        r.data(d.stb()).finish()
    }
}

struct Tst;
impl Command<ScpiAttenuator> for Tst {
    fn query(
        &self,
        _: &mut ScpiAttenuator,
        _: &mut Context,
        _: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        r.data(0u8).finish()
    }
}

struct Wai;
impl Command<ScpiAttenuator> for Wai {
    fn event(&self, _: &mut ScpiAttenuator, _: &mut Context, _: Parameters) -> Result<(), Error> {
        Ok(())
    }
}

struct ErrNext;
impl Command<ScpiAttenuator> for ErrNext {
    fn query(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        _: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        let e = d.errors.pop_front_error().unwrap_or_default();
        r.data(e).finish()
    }
}

struct ErrCount;
impl Command<ScpiAttenuator> for ErrCount {
    fn query(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        _: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        r.data(d.errors.num_errors()).finish()
    }
}

struct Version;
impl Command<ScpiAttenuator> for Version {
    fn query(
        &self,
        _: &mut ScpiAttenuator,
        _: &mut Context,
        _: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        r.data(Character(b"1999.0")).finish()
    }
}

/// The setting commands: `DAMPer:SETTing DB` and `LOSS[:LEVel] DB` set channel 1;
/// `PATH:ATTenuation CHANNEL,DB` (and its query, `PATH:ATTenuation? CHANNEL`) names the channel
/// first, one of several on a slotted bench. Both forms set and read a channel the same way.
struct Atten {
    /// Whether the channel comes as the first parameter; channel 1 when it does not.
    channel_named: bool,
}

impl Atten {
    /// The form that sets channel 1 alone.
    const ONE: Atten = Atten {
        channel_named: false,
    };
    /// The form that names its channel.
    const NAMED: Atten = Atten {
        channel_named: true,
    };

    fn channel(&self, p: &mut Parameters) -> Result<u32, Error> {
        if self.channel_named {
            p.next_data::<u32>()
        } else {
            Ok(1)
        }
    }
}

impl Command<ScpiAttenuator> for Atten {
    fn event(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        mut p: Parameters,
    ) -> Result<(), Error> {
        let channel = self.channel(&mut p)?;
        let db = p.next_data::<f64>()?;
        d.set_on(channel, db)
    }
    fn query(
        &self,
        d: &mut ScpiAttenuator,
        _: &mut Context,
        mut p: Parameters,
        mut r: ResponseUnit,
    ) -> Result<(), Error> {
        let channel = self.channel(&mut p)?;
        let db = d
            .channel(channel)?
            .atten_db()
            .map_err(|_| Error::new(ErrorCode::DeviceSpecificError))?;
        r.data(db).finish()
    }
}

const ROOT: Node<ScpiAttenuator> = Branch {
    name: b"",
    default: false,
    sub: &[
        Leaf {
            name: b"*CLS",
            default: false,
            handler: &Cls,
        },
        Leaf {
            name: b"*ESE",
            default: false,
            handler: &Ese,
        },
        Leaf {
            name: b"*ESR",
            default: false,
            handler: &Esr,
        },
        Leaf {
            name: b"*IDN",
            default: false,
            handler: &Idn,
        },
        Leaf {
            name: b"*OPC",
            default: false,
            handler: &Opc,
        },
        Leaf {
            name: b"*RST",
            default: false,
            handler: &Rst,
        },
        Leaf {
            name: b"*SRE",
            default: false,
            handler: &Sre,
        },
        Leaf {
            name: b"*STB",
            default: false,
            handler: &Stb,
        },
        Leaf {
            name: b"*TST",
            default: false,
            handler: &Tst,
        },
        Leaf {
            name: b"*WAI",
            default: false,
            handler: &Wai,
        },
        Branch {
            name: b"SYSTem",
            default: false,
            sub: &[
                Branch {
                    name: b"ERRor",
                    default: false,
                    sub: &[
                        Leaf {
                            name: b"NEXT",
                            default: true,
                            handler: &ErrNext,
                        },
                        Leaf {
                            name: b"COUNt",
                            default: false,
                            handler: &ErrCount,
                        },
                    ],
                },
                Leaf {
                    name: b"VERSion",
                    default: false,
                    handler: &Version,
                },
            ],
        },
        Branch {
            name: b"DAMPer",
            default: false,
            sub: &[Leaf {
                name: b"SETTing",
                default: true,
                handler: &Atten::ONE,
            }],
        },
        Branch {
            name: b"PATH",
            default: false,
            sub: &[Leaf {
                name: b"ATTenuation",
                default: true,
                handler: &Atten::NAMED,
            }],
        },
        Branch {
            name: b"LOSS",
            default: false,
            sub: &[Leaf {
                name: b"LEVel",
                default: true,
                handler: &Atten::ONE,
            }],
        },
    ],
};

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::Bench;
    use crate::clock::ClockMode;
    use crate::sim::SimBench;
    use std::sync::Arc;

    /// A simulated unit on the demo bench, seeded `seed`.
    fn model(seed: u64) -> SimShared {
        let bench = Bench::built_in().expect("demo bench");
        let truth = bench.sim.as_ref().expect("sim");
        let model = SimBench::new(truth, &bench.path, seed).expect("model");
        SimShared::new(
            crate::sim::front::SimWorld::radios(model),
            Arc::new(BenchClock::new(ClockMode::Virtual)),
        )
    }

    fn device() -> ScpiAttenuator {
        ScpiAttenuator::new(model(1), [0.0, 95.0], 0.25, 1.0)
    }

    fn ask(d: &mut ScpiAttenuator, message: &str) -> String {
        String::from_utf8(d.execute(message).0).expect("ascii")
    }

    #[test]
    fn golden_dialogue_of_the_common_commands() {
        let mut d = device();
        for (send, want) in [
            // IEEE 488.2-1992 §10.14: *IDN? answers four fields, maker,model,serial,firmware.
            (
                "*IDN?",
                format!(
                    "TAUCAL,SIM-STEP-ATTENUATOR,SIM0001,{}\n",
                    env!("CARGO_PKG_VERSION")
                ),
            ),
            // IEEE 488.2 §10.19: *OPC? answers ASCII 1 once pending operations are done.
            ("*OPC?", "1\n".to_string()),
            // SCPI 1999 Vol 2 §21.8: an empty queue reads 0,"No error".
            ("SYST:ERR?", "0,\"No error\"\n".to_string()),
            ("DAMPer:SETTing 17.5", String::new()),
            ("DAMP:SETT?", "17.5\n".to_string()),
            ("DAMP?", "17.5\n".to_string()),
            (":LOSS:LEVel 20.25", String::new()),
            (":LOSS:LEV?", "20.25\n".to_string()),
            ("LOSS?", "20.25\n".to_string()),
            // IEEE 488.2 §10.32: *TST? answers 0 when the self-test passes.
            ("*TST?", "0\n".to_string()),
            ("DAMP:SETT 10;*OPC?", "1\n".to_string()),
            ("SYSTem:VERSion?", "1999.0\n".to_string()),
        ] {
            assert_eq!(ask(&mut d, send), want, "{send}");
        }
    }

    #[test]
    fn errors_go_to_the_queue_with_standard_codes() {
        let mut d = device();
        // SCPI 1999 Vol 2 §21.8.9 (from memory): -113 Undefined header.
        assert_eq!(ask(&mut d, "FREQ 5"), "");
        // -222 Data out of range; -224 Illegal parameter value (SCPI 1999 Vol 2 §21.8.10).
        assert_eq!(ask(&mut d, "DAMP 120"), "");
        assert_eq!(ask(&mut d, "DAMP 10.1"), "");
        // IEEE 488.2 §11.2: STB bit 2 (4) set while the queue holds errors; ESR bit 5 (32)
        // Command Error and bit 4 (16) Execution Error.
        assert_eq!(ask(&mut d, "*STB?"), "4\n");
        assert_eq!(ask(&mut d, "SYST:ERR:COUN?"), "3\n");
        assert_eq!(ask(&mut d, "SYST:ERR?"), "-113,\"Undefined header\"\n");
        assert_eq!(ask(&mut d, "SYST:ERR?"), "-222,\"Data out of range\"\n");
        assert_eq!(
            ask(&mut d, "SYST:ERR:NEXT?"),
            "-224,\"Illegal parameter value\"\n"
        );
        assert_eq!(ask(&mut d, "SYST:ERR?"), "0,\"No error\"\n");
        assert_eq!(ask(&mut d, "*ESR?"), "48\n");
        assert_eq!(ask(&mut d, "*ESR?"), "0\n");
        // Refused settings leave it where it powered up: maximum attenuation.
        assert_eq!(ask(&mut d, "DAMP?"), "95.0\n");
        // The bare root-level command of no shipped driver is not understood.
        assert_eq!(ask(&mut d, "ATT 20"), "");
        assert_eq!(ask(&mut d, "SYST:ERR?"), "-113,\"Undefined header\"\n");
    }

    #[test]
    fn it_powers_up_at_maximum_attenuation_before_any_command() {
        let d = device();
        assert_eq!(d.shared.atten_db(), Ok(95.0));
    }

    #[test]
    fn the_queue_overflows_to_minus_350_and_cls_clears_it() {
        let mut d = device();
        for _ in 0..QUEUE_DEPTH + 3 {
            ask(&mut d, "NOPE");
        }
        assert_eq!(ask(&mut d, "SYST:ERR:COUN?"), format!("{QUEUE_DEPTH}\n"));
        for _ in 0..QUEUE_DEPTH - 1 {
            assert_eq!(ask(&mut d, "SYST:ERR?"), "-113,\"Undefined header\"\n");
        }
        // SCPI 1999 Vol 2 §21.8.6 (from memory): -350 Queue overflow replaces the last entry.
        assert_eq!(ask(&mut d, "SYST:ERR?"), "-350,\"Queue overflow\"\n");
        ask(&mut d, "NOPE");
        ask(&mut d, "*CLS");
        assert_eq!(ask(&mut d, "SYST:ERR?"), "0,\"No error\"\n");
        // *RST puts the attenuator in its safe state, maximum attenuation.
        ask(&mut d, "*RST");
        assert_eq!(ask(&mut d, "DAMP?"), "95.0\n");
    }

    #[test]
    fn each_channel_is_set_and_read_alone_and_channel_1_is_the_one_channel_commands() {
        let mut d = device().with_channels(vec![model(2), model(3)]);
        // Every channel powers up at maximum attenuation.
        for n in 1..=3 {
            assert_eq!(
                ask(&mut d, &format!("PATH:ATT? {n}")),
                "95.0\n",
                "channel {n}"
            );
        }
        assert_eq!(ask(&mut d, "PATH:ATTenuation 2,30.5"), "");
        assert_eq!(ask(&mut d, "PATH:ATT 3,12.25;:PATH:ATT? 3"), "12.25\n");
        assert_eq!(ask(&mut d, "PATH:ATT? 2"), "30.5\n");
        // The one-channel forms set and read channel 1, and channel 1 alone.
        assert_eq!(ask(&mut d, "LOSS 40"), "");
        assert_eq!(ask(&mut d, "PATH:ATT? 1"), "40.0\n");
        assert_eq!(ask(&mut d, "PATH:ATT 1,41;:DAMP?"), "41.0\n");
        assert_eq!(ask(&mut d, "PATH:ATT? 2"), "30.5\n");
        // A channel the attenuator does not have, and a setting off its grid: -224 Illegal
        // parameter value (SCPI 1999 Vol 2 §21.8.10), nothing changed.
        assert_eq!(ask(&mut d, "PATH:ATT 4,20"), "");
        assert_eq!(ask(&mut d, "PATH:ATT? 0"), "");
        assert_eq!(ask(&mut d, "PATH:ATT 2,20.1"), "");
        for _ in 0..3 {
            assert_eq!(
                ask(&mut d, "SYST:ERR?"),
                "-224,\"Illegal parameter value\"\n"
            );
        }
        assert_eq!(ask(&mut d, "PATH:ATT? 2"), "30.5\n");
        // *RST is the safe state on every channel.
        ask(&mut d, "*RST");
        for n in 1..=3 {
            assert_eq!(
                ask(&mut d, &format!("PATH:ATT? {n}")),
                "95.0\n",
                "channel {n}"
            );
        }
    }
}
