//! `taucal sim serve`: serve the simulated bench's instruments on TCP sockets and
//! pseudo-terminals until SIGINT or SIGTERM, or one of them on stdin/stdout until stdin ends
//! (`--stdio`), for a client that starts the server as its instrument program.

use super::args::SimServeArgs;
use super::{bench_arg, Exit};
use crate::bench::Bench;
use crate::diagnostic::Diagnostic;
use crate::sim::serve::{Listen, ServedBench, ServedRole};

/// Where each role is served when no `--listen` is given.
pub const DEFAULT_LISTEN: [&str; 2] = ["attenuator=tcp:127.0.0.1:5025", "dut=tcp:127.0.0.1:5026"];

/// Parses the listeners, refusing non-loopback ones unless `--allow-remote`. Each comes with
/// the role name it was asked by (a slot's DUT role on a slotted bench).
fn listeners(args: &SimServeArgs, bench: &Bench) -> Result<Vec<(String, Listen)>, Diagnostic> {
    let texts: Vec<&str> = if args.listen.is_empty() && args.stdio.is_none() {
        DEFAULT_LISTEN.to_vec()
    } else {
        args.listen.iter().map(String::as_str).collect()
    };
    let mut out: Vec<(String, Listen)> = Vec::new();
    for text in texts {
        let listen = parse_listen(text, bench).map_err(|m| {
            Diagnostic::plain(format!("--listen {text}: {m}"))
                .with_hint("e.g. --listen attenuator=tcp:127.0.0.1:5025 --listen dut=pty")
        })?;
        if let Some(ip) = listen.at.ip() {
            if !ip.is_loopback() {
                if !args.allow_remote {
                    return Err(Diagnostic::plain(format!(
                        "--listen {text}: {ip} is not a loopback address"
                    ))
                    .with_hint("simulated instruments are served on loopback only; add --allow-remote to expose them on the network"));
                }
                eprintln!(
                    "taucal: WARNING: serving the simulated {} on {ip}, reachable from the network",
                    listen.role.name()
                );
            }
        }
        if out.iter().any(|(_, l)| l.role == listen.role)
            || stdio_role(args, bench)? == Some(listen.role)
        {
            return Err(Diagnostic::plain(format!(
                "--listen {text}: the {} is already served",
                listen.role.name()
            ))
            .with_hint("serve each role once"));
        }
        let name = text.split_once('=').map_or(text, |(role, _)| role);
        out.push((name.to_string(), listen));
    }
    Ok(out)
}

/// What a slotted bench's own role name serves: a slot's DUT role its slot's unit, a slot's
/// attenuator role the attenuator.
fn slot_role(role: &str, bench: &Bench) -> Option<ServedRole> {
    if let Some(i) = bench.slots.iter().position(|s| s.dut == role) {
        return Some(ServedRole::SlotDut(i));
    }
    bench
        .slots
        .iter()
        .any(|s| s.attenuator == role)
        .then_some(ServedRole::Attenuator)
}

/// [`Listen::parse`], with a slotted bench's slot DUT roles served as their slots' units.
fn parse_listen(text: &str, bench: &Bench) -> Result<Listen, String> {
    let Some((role, at)) = text.split_once('=') else {
        return Listen::parse(text);
    };
    match slot_role(role, bench) {
        Some(served) => {
            Listen::parse(&format!("{}={at}", served.name())).map(|l| Listen { role: served, ..l })
        }
        None => Listen::parse(text).map_err(|m| with_slot_roles(m, bench)),
    }
}

/// A message about an unknown role, naming the slot DUT roles a slotted bench also serves.
fn with_slot_roles(message: String, bench: &Bench) -> String {
    if bench.is_slotted() {
        let roles: Vec<&str> = bench.slots.iter().map(|s| s.dut.as_str()).collect();
        format!(
            "{message}; or a slot's DUT ({}) or attenuator role",
            roles.join(", ")
        )
    } else {
        message
    }
}

/// The role `--stdio` names, if any.
fn stdio_role(args: &SimServeArgs, bench: &Bench) -> Result<Option<ServedRole>, Diagnostic> {
    args.stdio
        .as_deref()
        .map(|role| {
            let by_name = match slot_role(role, bench) {
                Some(served) => Ok(served),
                None => ServedRole::from_name(role).map_err(|m| with_slot_roles(m, bench)),
            };
            by_name.map_err(|m| {
                Diagnostic::plain(format!("--stdio {role}: {m}"))
                    .with_hint("e.g. --stdio dut, or --stdio attenuator")
            })
        })
        .transpose()
}

/// Serves until interrupted. Prints `ROLE ADDRESS` on stdout for each role once it is ready
/// (on stderr with `--stdio`, whose stdout is the served instrument's).
pub fn run(args: SimServeArgs) -> Result<Exit, Diagnostic> {
    let bench = bench_arg::load(&args.bench)?;
    let stdio = stdio_role(&args, &bench)?;
    let listen = listeners(&args, &bench)?;
    let seed = args
        .seed
        .or(bench.sim.as_ref().map(|s| s.seed))
        .unwrap_or(1);
    let served = ServedBench::new(&bench, seed, args.realtime)?
        .with_max_clients(usize::from(args.max_clients))
        .with_portmapper_port(args.portmapper_port);
    if let Some(role) = stdio {
        eprintln!(
            "taucal: serving the simulated {} of `{}` on stdin/stdout (seed {seed}); it ends with stdin",
            role.name(),
            bench.name
        );
        return serve_stdio(&served, role, &listen);
    }
    // SIGINT and SIGTERM are blocked before the runtime's threads exist (they inherit the mask)
    // and waited for on this thread alone, so a stop is seen however busy the servers are.
    let stop_signals = stop_signals();
    stop_signals
        .thread_block()
        .map_err(|e| Diagnostic::plain(format!("cannot watch for SIGINT/SIGTERM: {e}")))?;
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| Diagnostic::plain(format!("cannot start the server runtime: {e}")))?;
    rt.block_on(async {
        for (name, l) in &listen {
            let address = served.start(l).await.map_err(|e| {
                Diagnostic::plain(format!("cannot serve the {name}: {e}"))
                    .with_hint("pick a free port (tcp:127.0.0.1:0 lets the system choose)")
            })?;
            println!("{name} {address}");
        }
        eprintln!(
            "taucal: serving the simulated bench `{}` (seed {seed}, {} time); stop with Ctrl-C",
            bench.name,
            if args.realtime {
                "wall-clock paced"
            } else {
                "virtual"
            }
        );
        if let Some(f) = bench.sim.as_ref().map(|s| &s.faults) {
            if f.drop_connection_every > 0
                || f.reply_timeout_rate > 0.0
                || f.garbled_reply_rate > 0.0
                || f.dut_restart_every > 0
                || f.failed_exchange_rate > 0.0
            {
                eprintln!(
                    "taucal: injecting faults (0 = never): connection dropped every {} commands, \
                     {} of queries silent, {} of replies garbled, DUT restart every {} \
                     exchanges, {} of exchanges failed",
                    f.drop_connection_every,
                    f.reply_timeout_rate,
                    f.garbled_reply_rate,
                    f.dut_restart_every,
                    f.failed_exchange_rate
                );
            }
        }
        Ok::<(), Diagnostic>(())
    })?;
    let signal = stop_signals
        .wait()
        .map_err(|e| Diagnostic::plain(format!("cannot wait for SIGINT/SIGTERM: {e}")))?;
    // Served bursts are short (the console's limits), but nothing a client asked for may keep
    // the process alive once it is told to stop: work still running is abandoned.
    rt.shutdown_timeout(std::time::Duration::from_millis(200));
    eprintln!("taucal: stopped ({})", signal.as_str());
    Ok(Exit::Ok)
}

/// Serves `role` on stdin/stdout, and `listen` beside it, until stdin ends. The client that
/// started this process ends it by closing stdin (or killing it): signals keep their default
/// effect.
fn serve_stdio(
    served: &ServedBench,
    role: ServedRole,
    listen: &[(String, Listen)],
) -> Result<Exit, Diagnostic> {
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| Diagnostic::plain(format!("cannot start the server runtime: {e}")))?;
    let outcome = rt.block_on(async {
        for (name, l) in listen {
            let address = served
                .start(l)
                .await
                .map_err(|e| Diagnostic::plain(format!("cannot serve the {name}: {e}")))?;
            eprintln!("{name} {address}");
        }
        served.serve_stdio(role).await.map_err(|e| {
            Diagnostic::plain(format!("serving the {} on stdin/stdout: {e}", role.name()))
        })
    });
    // Stdin has ended; a blocked read of it must not hold the process.
    rt.shutdown_timeout(std::time::Duration::from_millis(200));
    outcome.map(|()| Exit::Ok)
}

fn stop_signals() -> nix::sys::signal::SigSet {
    use nix::sys::signal::{SigSet, Signal};
    let mut set = SigSet::empty();
    set.add(Signal::SIGINT);
    set.add(Signal::SIGTERM);
    set
}
