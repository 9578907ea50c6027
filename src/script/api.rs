//! The functions a recipe script can call. Each is a thin bridge to the run's [`Session`]; an
//! instrument or limit failure is parked in `fault` so the runner reports the real cause, and the
//! script sees an error at the calling line.

use super::budget::Budget;
use crate::data::Exchange;
use crate::recipe::plan::BANDWIDTHS_MHZ;
use crate::recipe::{Channel, Vars};
use crate::runner::{RunError, Session};
use rhai::{Array, Dynamic, Engine, EvalAltResult, Map, INT};
use std::cell::RefCell;
use std::rc::Rc;

type Shared<T> = Rc<RefCell<T>>;
type Res<T> = Result<T, Box<EvalAltResult>>;

/// The session, the slot where the first run failure is kept, and the stage's budget.
#[derive(Clone)]
pub struct Bridge {
    /// The run's session.
    pub session: Shared<Session>,
    /// The failure behind a script error, if it came from the run rather than the script.
    pub fault: Shared<Option<RunError>>,
    /// What the stage may still spend.
    pub budget: Rc<Budget>,
}

impl Bridge {
    /// Runs a bench call on the session; its wall time is waiting on the bench, not computing.
    fn call<T>(&self, op: impl FnOnce(&mut Session) -> Result<T, RunError>) -> Res<T> {
        let start = std::time::Instant::now();
        let r = op(&mut self.session.borrow_mut());
        self.budget.in_calls(start.elapsed());
        self.park(r)
    }

    fn park<T>(&self, r: Result<T, RunError>) -> Res<T> {
        r.map_err(|e| {
            let text = e.to_string();
            *self.fault.borrow_mut() = Some(e);
            text.into()
        })
    }
}

fn int_or_float(d: &Dynamic) -> Option<f64> {
    d.as_float()
        .ok()
        .or_else(|| d.as_int().ok().map(|i| i as f64))
}

fn number(name: &str, d: Dynamic) -> Res<f64> {
    int_or_float(&d).ok_or_else(|| format!("{name} takes a number, not {}", d.type_name()).into())
}

fn to_dynamic(v: &toml::Value) -> Dynamic {
    match v {
        toml::Value::Integer(i) => Dynamic::from_int(*i),
        toml::Value::Float(f) => Dynamic::from_float(*f),
        toml::Value::Boolean(b) => Dynamic::from_bool(*b),
        other => Dynamic::from(
            other
                .as_str()
                .map_or_else(|| other.to_string(), str::to_string),
        ),
    }
}

fn opt_int<T: Into<i64>>(v: Option<T>) -> Dynamic {
    v.map_or(Dynamic::UNIT, |x| Dynamic::from_int(x.into()))
}

fn exchange_map(x: &Exchange) -> Map {
    let mut m = Map::new();
    let ts = |t: Option<u64>| {
        t.and_then(|t| i64::try_from(t).ok())
            .map_or(Dynamic::UNIT, Dynamic::from_int)
    };
    m.insert("seq".into(), Dynamic::from_int(x.seq.into()));
    m.insert("t1_ps".into(), ts(x.t1_ps));
    m.insert("t2_ps".into(), ts(x.t2_ps));
    m.insert("t3_ps".into(), ts(x.t3_ps));
    m.insert("t4_ps".into(), ts(x.t4_ps));
    m.insert("dut_gain".into(), opt_int(x.dut_gain));
    m.insert("ref_gain".into(), opt_int(x.ref_gain));
    m.insert(
        "dut_rssi_dbm".into(),
        x.dut_rssi_dbm.map_or(Dynamic::UNIT, Dynamic::from_float),
    );
    m.insert("status".into(), Dynamic::from(x.status.clone()));
    m
}

/// Registers the script API on `engine`.
pub fn register(engine: &mut Engine, bridge: &Bridge, vars: &Vars) {
    let b = bridge.clone();
    engine.register_fn("set_atten", move |db: Dynamic| -> Res<()> {
        let db = number("set_atten", db)?;
        b.call(|s| s.set_atten(db))
    });
    let b = bridge.clone();
    engine.register_fn("atten", move || -> Res<Dynamic> {
        Ok(b.session
            .borrow()
            .atten_db()
            .map_or(Dynamic::UNIT, Dynamic::from_float))
    });
    let b = bridge.clone();
    engine.register_fn("wait_ms", move |ms: Dynamic| -> Res<()> {
        let ms = number("wait_ms", ms)?;
        if !(0.0..=86_400_000.0).contains(&ms) {
            return Err(format!("wait_ms({ms}): give 0 to 86400000 ms").into());
        }
        let now_s = b.session.borrow().clock().now_s();
        if !b.budget.wait_fits(now_s, ms) {
            return Err(format!(
                "wait_ms({ms}) would take the stage past its time_limit_s of {} s",
                b.budget.time_limit_s()
            )
            .into());
        }
        b.call(|s| s.wait_ms(ms))
    });
    let b = bridge.clone();
    engine.register_fn("channel", move |center: INT, bw: INT| -> Res<()> {
        let ok_center = (2400..=7200).contains(&center);
        let ok_bw = BANDWIDTHS_MHZ.iter().any(|w| i64::from(*w) == bw);
        if !ok_center || !ok_bw {
            return Err(format!(
                "channel({center}, {bw}): center must be 2400..7200 MHz and bandwidth 20, 40, 80, 160 or 320 MHz"
            )
            .into());
        }
        b.call(|s| {
            s.set_channel(Channel {
                center_mhz: center as u32,
                bw_mhz: bw as u32,
            })
        })
    });
    let b = bridge.clone();
    engine.register_fn("burst", move |frames: INT| -> Res<Array> {
        if !(2..=i64::from(crate::recipe::plan::MAX_FRAMES)).contains(&frames) {
            return Err(format!(
                "burst({frames}): give 2 to {} exchanges",
                crate::recipe::plan::MAX_FRAMES
            )
            .into());
        }
        let rows = b.call(|s| s.burst(frames as u32))?;
        Ok(rows
            .iter()
            .map(|x| Dynamic::from_map(exchange_map(x)))
            .collect())
    });
    let b = bridge.clone();
    engine.register_fn("seen", move || -> Array {
        b.session
            .borrow()
            .points
            .iter()
            .map(|p| {
                let mut m = Map::new();
                m.insert("stage".into(), Dynamic::from(p.stage.clone()));
                m.insert("point".into(), Dynamic::from_int(p.point.into()));
                m.insert("atten_db".into(), Dynamic::from_float(p.atten_db));
                m.insert(
                    "center_mhz".into(),
                    Dynamic::from_int(p.channel.center_mhz.into()),
                );
                m.insert("bw_mhz".into(), Dynamic::from_int(p.channel.bw_mhz.into()));
                let gains: Map = p
                    .ok_by_gain
                    .iter()
                    .map(|(g, n)| (g.to_string().into(), Dynamic::from_int(*n as i64)))
                    .collect();
                m.insert("ok_by_gain".into(), Dynamic::from_map(gains));
                m.insert("failed".into(), Dynamic::from_int(p.failed as i64));
                Dynamic::from_map(m)
            })
            .collect()
    });
    let b = bridge.clone();
    engine.register_fn("rx_level_dbm", move |db: Dynamic| -> Res<f64> {
        let db = number("rx_level_dbm", db)?;
        Ok(b.session.borrow().bench().dut_rx_dbm(db))
    });
    let b = bridge.clone();
    engine.register_fn("usable_atten", move || -> Res<Map> {
        let s = b.session.borrow();
        let step = s.bench().attenuator.step_db;
        let (lo, hi) = s
            .bench()
            .usable_atten_db()
            .ok_or("the bench has no usable attenuation range")?;
        let mut m = Map::new();
        m.insert("from".into(), Dynamic::from_float(lo));
        m.insert("to".into(), Dynamic::from_float(hi));
        m.insert("step".into(), Dynamic::from_float(step));
        Ok(m)
    });
    let b = bridge.clone();
    engine.register_fn("bench_time_s", move || -> f64 {
        b.session.borrow().clock().now_s()
    });
    let b = bridge.clone();
    engine.register_fn("record", move |name: &str, value: Dynamic| -> Res<()> {
        let v = if let Ok(i) = value.as_int() {
            toml::Value::Integer(i)
        } else if let Ok(f) = value.as_float() {
            toml::Value::Float(f)
        } else if let Ok(t) = value.as_bool() {
            toml::Value::Boolean(t)
        } else if value.is_string() {
            toml::Value::String(value.to_string())
        } else {
            return Err(
                format!("record(\"{name}\", …) takes a number, a boolean or a string").into(),
            );
        };
        b.session.borrow_mut().results.insert(name.to_string(), v);
        Ok(())
    });
    // `log` refuses at the calling line once the stage has logged too much; `print` cannot
    // fail, so it drops the line and the progress hook stops the script at its next operation.
    let budget = bridge.budget.clone();
    engine.register_fn("log", move |msg: &str| -> Res<()> {
        if !budget.log(msg.len()) {
            let (message, _) = super::budget::Exceeded::LogVolume.describe();
            return Err(message.into());
        }
        tracing::info!(target: "script", "{msg}");
        Ok(())
    });
    let budget = bridge.budget.clone();
    engine.on_print(move |msg| {
        if budget.log(msg.len()) {
            tracing::info!(target: "script", "{msg}");
        }
    });
    engine.on_debug(|msg, _, pos| tracing::debug!(target: "script", "{pos:?}: {msg}"));
    let vars = vars.clone();
    engine.register_fn("var", move |name: &str| -> Res<Dynamic> {
        vars.0.get(name).map(to_dynamic).ok_or_else(|| {
            format!("var(\"{name}\"): the recipe declares no such variable under [vars]").into()
        })
    });
}

/// The recipe's variables as a Rhai object map, bound as the constant `vars` in every script.
pub fn vars_map(vars: &Vars) -> Map {
    vars.0
        .iter()
        .map(|(k, v)| (k.as_str().into(), to_dynamic(v)))
        .collect()
}
