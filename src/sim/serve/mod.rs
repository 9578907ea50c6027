//! `taucal sim serve`: the simulated bench's instruments served as real ones — the attenuator
//! as a SCPI instrument on a TCP socket, the DUT's console on a TCP socket or a
//! pseudo-terminal — sharing one bench model, so a run through them exercises the real
//! transports and driver files and still records the exchanges the in-process bench would.
//!
//! The served instruments spend bench time on the server's own clock (virtual unless
//! realtime): the model never sees wall time, which keeps a served run deterministic.

pub mod console;
pub mod pty;
pub mod scpi_attenuator;

use crate::bench::Bench;
use crate::diagnostic::Diagnostic;
use crate::instrument::line::LineFramer;
use crate::runner::{BenchClock, ClockMode};
use crate::sim::front::{SimShared, SimWorld};
use crate::sim::SimBench;
use scpi_attenuator::ScpiAttenuator;
use std::net::{IpAddr, SocketAddr};
use std::sync::{Arc, Mutex};
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::net::{TcpListener, TcpStream};

/// The instruments a simulated bench can serve.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ServedRole {
    /// The step attenuator (SCPI).
    Attenuator,
    /// The DUT's console.
    Dut,
}

impl ServedRole {
    /// The role's name in bench files.
    pub fn name(self) -> &'static str {
        match self {
            ServedRole::Attenuator => "attenuator",
            ServedRole::Dut => "dut",
        }
    }
}

/// Where to serve a role.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ListenAt {
    /// A TCP socket.
    Tcp(SocketAddr),
    /// A new pseudo-terminal (its path is announced).
    Pty,
}

/// One `--listen ROLE=WHERE`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Listen {
    /// The role served.
    pub role: ServedRole,
    /// Where.
    pub at: ListenAt,
}

impl Listen {
    /// Parses `ROLE=tcp:HOST:PORT`, `ROLE=tcp:PORT` (loopback) or `ROLE=pty`.
    pub fn parse(text: &str) -> Result<Listen, String> {
        let (role, at) = text
            .split_once('=')
            .ok_or_else(|| format!("`{text}` is not ROLE=WHERE"))?;
        let role = match role {
            "attenuator" => ServedRole::Attenuator,
            "dut" => ServedRole::Dut,
            other => {
                return Err(format!(
                    "`{other}` is not a role sim serve offers (attenuator, dut)"
                ))
            }
        };
        let at = match at {
            "pty" if role == ServedRole::Dut => ListenAt::Pty,
            "pty" => return Err("only the dut's console can be served on a pty".into()),
            _ => {
                let rest = at
                    .strip_prefix("tcp:")
                    .ok_or_else(|| format!("`{at}` is not tcp:HOST:PORT, tcp:PORT or pty"))?;
                let socket = match rest.parse::<u16>() {
                    Ok(port) => SocketAddr::from(([127, 0, 0, 1], port)),
                    Err(_) => {
                        let (host, port) = rest
                            .rsplit_once(':')
                            .ok_or_else(|| format!("`{at}` has no port"))?;
                        let ip: IpAddr = host
                            .trim_start_matches('[')
                            .trim_end_matches(']')
                            .parse()
                            .map_err(|_| format!("`{host}` is not an IP address"))?;
                        let port = port
                            .parse()
                            .map_err(|_| format!("`{port}` is not a port"))?;
                        SocketAddr::new(ip, port)
                    }
                };
                ListenAt::Tcp(socket)
            }
        };
        Ok(Listen { role, at })
    }
}

/// The served bench: one model, its clock, and the attenuator's SCPI state.
#[derive(Clone)]
pub struct ServedBench {
    shared: SimShared,
    attenuator: Arc<Mutex<ScpiAttenuator>>,
}

impl ServedBench {
    /// Builds the model from the bench's `[sim]` and `[path]` with `seed`.
    pub fn new(bench: &Bench, seed: u64, realtime: bool) -> Result<ServedBench, Diagnostic> {
        let Some(truth) = &bench.sim else {
            return Err(bench.source.key_error(crate::diagnostic::KeyError::new(
                "bench",
                "has no [sim] table, so there is nothing to serve",
                "serve a simulated bench, e.g. recipes/benches/sim-demo.toml",
            )));
        };
        let model =
            SimBench::new(truth, &bench.path, seed).map_err(|e| bench.source.key_error(e))?;
        let mode = if realtime {
            ClockMode::Paced
        } else {
            ClockMode::Virtual
        };
        let shared = SimShared::new(SimWorld::radios(model), Arc::new(BenchClock::new(mode)));
        let attenuator = ScpiAttenuator::new(
            shared.clone(),
            bench.attenuator.range_db,
            bench.attenuator.step_db,
            truth.attenuator.switch_ms,
        );
        Ok(ServedBench {
            shared,
            attenuator: Arc::new(Mutex::new(attenuator)),
        })
    }

    /// Starts serving `listen`; returns the address clients use (`tcp:…` or `serial:…`).
    pub async fn start(&self, listen: &Listen) -> std::io::Result<String> {
        match (&listen.at, listen.role) {
            (ListenAt::Pty, _) => {
                let pty = pty::Pty::open()?;
                let address = format!("serial:{}", pty.path.display());
                let shared = self.shared.clone();
                tokio::spawn(async move {
                    if let Err(e) = console::serve(pty, shared).await {
                        tracing::warn!("dut console on the pty: {e}");
                    }
                });
                Ok(address)
            }
            (ListenAt::Tcp(socket), role) => {
                let listener = TcpListener::bind(socket).await?;
                let bound = listener.local_addr()?;
                let me = self.clone();
                tokio::spawn(async move {
                    loop {
                        let Ok((stream, peer)) = listener.accept().await else {
                            continue;
                        };
                        tracing::info!("{}: client {peer} connected", role.name());
                        let _ = stream.set_nodelay(true);
                        let me = me.clone();
                        tokio::spawn(async move {
                            let outcome = match role {
                                ServedRole::Attenuator => me.serve_scpi(stream).await,
                                ServedRole::Dut => console::serve(stream, me.shared.clone()).await,
                            };
                            if let Err(e) = outcome {
                                tracing::info!("{}: client {peer}: {e}", role.name());
                            }
                        });
                    }
                });
                Ok(format!("tcp:{bound}"))
            }
        }
    }

    async fn serve_scpi(&self, mut stream: TcpStream) -> std::io::Result<()> {
        let mut framer = LineFramer::new();
        let mut buf = [0u8; 1024];
        loop {
            let message = loop {
                match framer.next_line() {
                    Ok(Some(line)) => break line,
                    Ok(None) => {}
                    Err(_) => framer.clear(),
                }
                let n = stream.read(&mut buf).await?;
                if n == 0 {
                    return Ok(());
                }
                framer.push(&buf[..n]);
            };
            let (response, wall) = match self.attenuator.lock() {
                Ok(mut device) => device.execute(&message),
                Err(_) => return Ok(()),
            };
            if !wall.is_zero() {
                tokio::time::sleep(wall).await;
            }
            if !response.is_empty() {
                stream.write_all(&response).await?;
            }
        }
    }
}
