//! `taucal sim serve`: the simulated bench's instruments served as real ones — the attenuator
//! as a SCPI instrument on a TCP socket, the DUT's console (in the lines of the device its
//! `[sim.dut] reports` form stands for) on a TCP socket or a pseudo-terminal — sharing one bench
//! model, so a run through them exercises the real
//! transports and driver files and still records the exchanges the in-process bench would.
//!
//! `[sim.faults]` strike on the wire, one command at a time in the order commands arrive: a
//! dropped connection is closed before the command is carried out, a silent command is neither
//! carried out nor answered, a garbled reply is the real reply with its characters corrupted,
//! and a restarted DUT prints its boot banner instead of the burst and forgets it was
//! initialised until it is identified again.
//!
//! A slotted bench serves each slot's unit: one attenuator with a channel in front of each, each
//! slot's DUT console on a listener of its own, and one reference the slots contend for (booked
//! in the order bursts arrive: see [`crate::sim::shared_reference`]), so that, unlike the rest of
//! a served run, a served station's exchanges depend on when its clients' bursts arrive.
//!
//! The served instruments spend bench time on the server's own clock (virtual unless
//! realtime): the model never sees wall time, which keeps a served run deterministic. A served
//! chamber (`chamber`) is the exception: its temperatures follow the wall clock, as a soak does.

pub mod chamber;
pub mod console;
pub mod hislip;
pub mod message_device;
pub mod pty;
pub mod scpi_attenuator;
pub mod vxi11;

use crate::bench::Bench;
use crate::clock::{BenchClock, ClockMode};
use crate::diagnostic::Diagnostic;
use crate::instrument::line::LineFramer;
use crate::sim::chamber::SimChamber;
use crate::sim::faults::{garble, CommandFault, FaultInjector};
use crate::sim::front::{SimShared, SimWorld};
use crate::sim::shared_reference::SharedReference;
use crate::sim::SimBench;
use console::ConsoleDevice;
use scpi_attenuator::ScpiAttenuator;
use std::net::{IpAddr, SocketAddr};
use std::sync::{Arc, Mutex};
use tokio::io::{AsyncRead, AsyncReadExt, AsyncWrite, AsyncWriteExt};
use tokio::net::TcpListener;

/// Clients served at once on one role's socket unless told otherwise; more are closed as they
/// connect. A bench has one client per instrument, so this leaves room for a stray connection
/// or two.
pub const MAX_CLIENTS: usize = 8;

/// The instruments a simulated bench can serve.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ServedRole {
    /// The step attenuator (SCPI).
    Attenuator,
    /// The DUT's console.
    Dut,
    /// The climatic chamber (`[sim.chamber]`).
    Chamber,
    /// The DUT console of a slotted bench's slot, by its index in `[[slot]]` (served under the
    /// slot's DUT role name).
    SlotDut(usize),
}

impl ServedRole {
    /// The role named `name` in bench files, if sim serve offers it.
    pub fn from_name(name: &str) -> Result<ServedRole, String> {
        match name {
            "attenuator" => Ok(ServedRole::Attenuator),
            "dut" => Ok(ServedRole::Dut),
            "chamber" => Ok(ServedRole::Chamber),
            other => Err(format!(
                "`{other}` is not a role sim serve offers (attenuator, dut, chamber)"
            )),
        }
    }

    /// The role's name in bench files.
    pub fn name(self) -> &'static str {
        match self {
            ServedRole::Attenuator => "attenuator",
            ServedRole::Dut | ServedRole::SlotDut(_) => "dut",
            ServedRole::Chamber => "chamber",
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
    /// VXI-11: a portmapper on this address (its port `None`: the server's configured
    /// portmapper port, 111 unless told otherwise), the core channel on a port of the system's
    /// choosing.
    Vxi11 {
        /// The address both listen on.
        ip: IpAddr,
        /// The portmapper's port, when the listen address names one.
        portmapper_port: Option<u16>,
    },
    /// HiSLIP on this socket (4880 when not named).
    Hislip(SocketAddr),
}

impl ListenAt {
    /// The IP address listened on, if a socket.
    pub fn ip(&self) -> Option<IpAddr> {
        match self {
            ListenAt::Tcp(s) | ListenAt::Hislip(s) => Some(s.ip()),
            ListenAt::Vxi11 { ip, .. } => Some(*ip),
            ListenAt::Pty => None,
        }
    }
}

/// `HOST[:PORT]` with an IP literal for a host (IPv6 in brackets); the port `None` when left
/// out.
fn ip_and_port(text: &str) -> Result<(IpAddr, Option<u16>), String> {
    let (host, port) = if let Some(v6) = text.strip_prefix('[') {
        let (host, after) = v6.split_once(']').ok_or("an IPv6 address needs its `]`")?;
        (host, after.strip_prefix(':'))
    } else {
        match text.rsplit_once(':') {
            Some((h, p)) => (h, Some(p)),
            None => (text, None),
        }
    };
    let ip: IpAddr = host
        .parse()
        .map_err(|_| format!("`{host}` is not an IP address"))?;
    let port = port
        .map(|p| p.parse::<u16>().map_err(|_| format!("`{p}` is not a port")))
        .transpose()?;
    Ok((ip, port))
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
        let role = ServedRole::from_name(role)?;
        let at = match at {
            "pty" if role == ServedRole::Dut => ListenAt::Pty,
            "pty" => return Err("only the dut's console can be served on a pty".into()),
            _ if crate::instrument::transport::visa::looks_like_visa(at) => {
                use crate::instrument::transport::Address;
                let ip = |host: &str| -> Result<IpAddr, String> {
                    host.parse().map_err(|_| {
                        format!("`{host}` is not an IP address (a server listens on one)")
                    })
                };
                match Address::parse(at).map_err(|e| e.explained())? {
                    Address::Tcp { host, port } => ListenAt::Tcp(SocketAddr::new(ip(&host)?, port)),
                    Address::Vxi11 { host, device, .. } if device == "inst0" => ListenAt::Vxi11 {
                        ip: ip(&host)?,
                        portmapper_port: None,
                    },
                    Address::Hislip { host, port, .. } => {
                        ListenAt::Hislip(SocketAddr::new(ip(&host)?, port))
                    }
                    _ => {
                        return Err(format!(
                            "`{at}` is not a resource sim serve offers (TCPIP::IP::PORT::SOCKET, TCPIP::IP::inst0::INSTR, TCPIP::IP::hislip0[,PORT]::INSTR)"
                        ))
                    }
                }
            }
            _ if at.starts_with("vxi11:") || at.starts_with("hislip:") => {
                let vxi11 = at.starts_with("vxi11:");
                let rest = at.split_once(':').map_or("", |(_, r)| r);
                let (ip, port) = ip_and_port(rest)?;
                if vxi11 {
                    ListenAt::Vxi11 {
                        ip,
                        portmapper_port: port,
                    }
                } else {
                    ListenAt::Hislip(SocketAddr::new(
                        ip,
                        port.unwrap_or(crate::instrument::transport::visa::HISLIP_PORT),
                    ))
                }
            }
            _ => {
                let rest = at.strip_prefix("tcp:").ok_or_else(|| {
                    format!("`{at}` is not tcp:HOST:PORT, tcp:PORT, vxi11:HOST[:PORTMAPPER_PORT], hislip:HOST[:PORT], a VISA resource string or pty")
                })?;
                let socket = match rest.parse::<u16>() {
                    Ok(port) => SocketAddr::from(([127, 0, 0, 1], port)),
                    Err(_) => match ip_and_port(rest)? {
                        (ip, Some(port)) => SocketAddr::new(ip, port),
                        (_, None) => return Err(format!("`{at}` has no port")),
                    },
                };
                ListenAt::Tcp(socket)
            }
        };
        if matches!(at, ListenAt::Vxi11 { .. } | ListenAt::Hislip(_))
            && role != ServedRole::Attenuator
        {
            return Err(format!(
                "VXI-11 and HiSLIP carry the attenuator's SCPI messages; the {} speaks lines (serve it on tcp: or pty)",
                role.name()
            ));
        }
        Ok(Listen { role, at })
    }
}

/// What carries a served instrument's lines, which decides how a dropped connection looks.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Medium {
    /// A TCP connection: a drop closes it.
    Socket,
    /// A (pseudo-)terminal has no connection to drop: the command is lost, as on a glitching
    /// serial line.
    Terminal,
}

/// The served bench: one model, its clock, and the attenuator's SCPI state.
#[derive(Clone)]
pub struct ServedBench {
    shared: SimShared,
    attenuator: Arc<Mutex<ScpiAttenuator>>,
    console: ConsoleDevice,
    /// The chamber's controller, when the bench has a `[sim.chamber]`.
    chamber: Option<Arc<Mutex<chamber::Controller>>>,
    /// A slotted bench's units in `[[slot]]` order: each one's model and console (the first is
    /// `shared`'s).
    slots: Vec<(SimShared, ConsoleDevice)>,
    /// Clients served at once on each socket.
    max_clients: usize,
    /// The VXI-11 portmapper's port where a listen address does not name one.
    portmapper_port: u16,
}

impl ServedBench {
    /// Builds the model from the bench's `[sim]` and its true path (`[sim.path]` where it
    /// differs from the declared `[path]`) with `seed`.
    pub fn new(bench: &Bench, seed: u64, realtime: bool) -> Result<ServedBench, Diagnostic> {
        let Some(truth) = &bench.sim else {
            return Err(bench.source.key_error(crate::diagnostic::KeyError::new(
                "bench",
                "has no [sim] table, so there is nothing to serve",
                "serve a simulated bench, e.g. recipes/benches/sim-demo.toml",
            )));
        };
        // A slotted bench serves its first slot's unit and one attenuator channel per slot.
        let first = bench.for_slot(0);
        let truth = first.as_ref().and_then(|b| b.sim.as_ref()).unwrap_or(truth);
        let model = SimBench::new(truth, &truth.true_path(&bench.path), seed)
            .map_err(|e| bench.source.key_error(e))?;
        let mode = if realtime {
            ClockMode::Paced
        } else {
            ClockMode::Virtual
        };
        let world = SimWorld {
            bench: model,
            chamber: truth.chamber.as_ref().map(SimChamber::new),
            faults: FaultInjector::new(&truth.faults, seed),
        };
        let (_reference, seats) = SharedReference::in_arrival_order(bench.slots.len());
        let mut seats = seats.into_iter();
        let mut shared = SimShared::new(world, Arc::new(BenchClock::new(mode)))
            .with_chamber_clock(Arc::new(BenchClock::new(ClockMode::Wall)));
        if let Some(seat) = seats.next() {
            shared = shared.with_seat(seat);
        }
        let console = ConsoleDevice::new(truth.dut.reports, truth.dut.serial.clone());
        let mut slots = Vec::new();
        if bench.is_slotted() {
            slots.push((shared.clone(), console.clone()));
        }
        let mut more = Vec::new();
        for i in 1..bench.slots.len() {
            let Some(slot) = bench.for_slot(i) else {
                continue;
            };
            let Some(t) = slot.sim.as_ref() else { continue };
            let model = SimBench::new(t, &t.true_path(&bench.path), seed.wrapping_add(i as u64))
                .map_err(|e| bench.source.key_error(e))?;
            let world = SimWorld {
                bench: model,
                chamber: None,
                faults: FaultInjector::new(&t.faults, seed.wrapping_add(i as u64)),
            };
            let mut unit = SimShared::new(world, Arc::new(BenchClock::new(mode)));
            if let Some(seat) = seats.next() {
                unit = unit.with_seat(seat);
            }
            slots.push((
                unit.clone(),
                ConsoleDevice::new(t.dut.reports, t.dut.serial.clone()),
            ));
            more.push(unit);
        }
        let attenuator = ScpiAttenuator::new(
            shared.clone(),
            bench.attenuator.range_db,
            bench.attenuator.step_db,
            truth.attenuator.switch_ms,
        )
        .with_channels(more);
        Ok(ServedBench {
            shared,
            attenuator: Arc::new(Mutex::new(attenuator)),
            console,
            chamber: truth
                .chamber
                .as_ref()
                .map(|c| Arc::new(Mutex::new(chamber::Controller::new(c.start_c)))),
            slots,
            max_clients: MAX_CLIENTS,
            portmapper_port: crate::instrument::transport::visa::PORTMAPPER_PORT,
        })
    }

    /// The same bench serving at most `clients` clients at once on each socket (1: an
    /// instrument that takes one connection, as many real ones do).
    pub fn with_max_clients(mut self, clients: usize) -> Self {
        self.max_clients = clients.max(1);
        self
    }

    /// The same bench with its VXI-11 portmapper on `port` where `--listen` names none (0:
    /// the system chooses).
    pub fn with_portmapper_port(mut self, port: u16) -> Self {
        self.portmapper_port = port;
        self
    }

    /// The model and console behind a DUT role: the bench's DUT (a slotted bench's first
    /// slot) or a slot's.
    fn console_of(&self, role: ServedRole) -> std::io::Result<(SimShared, ConsoleDevice)> {
        match role {
            ServedRole::SlotDut(i) => self.slots.get(i).cloned().ok_or_else(|| {
                std::io::Error::other(format!("the bench has no slot number {}", i + 1))
            }),
            _ => Ok((self.shared.clone(), self.console.clone())),
        }
    }

    /// Starts serving `listen`; returns the address clients use (`tcp:…` or `serial:…`).
    pub async fn start(&self, listen: &Listen) -> std::io::Result<String> {
        match (&listen.at, listen.role) {
            (ListenAt::Pty, role) => {
                let (shared, device) = self.console_of(role)?;
                let pty = pty::Pty::open()?;
                let address = format!("serial:{}", pty.path.display());
                tokio::spawn(async move {
                    if let Err(e) = console::serve(pty, shared, device, Medium::Terminal).await {
                        tracing::warn!("dut console on the pty: {e}");
                    }
                });
                Ok(address)
            }
            (ListenAt::Tcp(_), ServedRole::Chamber) if self.chamber.is_none() => {
                Err(std::io::Error::other(
                    "the bench has no [sim.chamber] to serve; add one (start_c, ramp_c_per_min, \
                     dut_tau_s) or serve a bench with a chamber, e.g. \
                     recipes/benches/soak-served.toml",
                ))
            }
            (ListenAt::Vxi11 { .. } | ListenAt::Hislip(_), role)
                if role != ServedRole::Attenuator =>
            {
                Err(std::io::Error::other(
                    "only the attenuator is served over VXI-11 and HiSLIP",
                ))
            }
            (
                ListenAt::Vxi11 {
                    ip,
                    portmapper_port,
                },
                _,
            ) => {
                self.start_vxi11(*ip, portmapper_port.unwrap_or(self.portmapper_port))
                    .await
            }
            (ListenAt::Hislip(socket), _) => self.start_hislip(*socket).await,
            (ListenAt::Tcp(socket), role) => {
                let listener = TcpListener::bind(socket).await?;
                let bound = listener.local_addr()?;
                let me = self.clone();
                let most = self.max_clients;
                let clients = Arc::new(tokio::sync::Semaphore::new(most));
                tokio::spawn(async move {
                    loop {
                        let Ok((stream, peer)) = listener.accept().await else {
                            continue;
                        };
                        // Each client costs a buffer and a task: past the cap, close at once.
                        let Ok(permit) = clients.clone().try_acquire_owned() else {
                            tracing::warn!(
                                "{}: client {peer} refused: {most} already connected",
                                role.name()
                            );
                            continue;
                        };
                        tracing::info!("{}: client {peer} connected", role.name());
                        let _ = stream.set_nodelay(true);
                        let me = me.clone();
                        tokio::spawn(async move {
                            let outcome = match role {
                                ServedRole::Attenuator => {
                                    me.serve_scpi(stream, Medium::Socket).await
                                }
                                ServedRole::Dut | ServedRole::SlotDut(_) => {
                                    match me.console_of(role) {
                                        Ok((shared, device)) => {
                                            console::serve(stream, shared, device, Medium::Socket)
                                                .await
                                        }
                                        Err(e) => Err(e),
                                    }
                                }
                                ServedRole::Chamber => match me.chamber.clone() {
                                    Some(controller) => {
                                        chamber::serve(stream, me.shared.clone(), controller).await
                                    }
                                    None => Ok(()),
                                },
                            };
                            if let Err(e) = outcome {
                                tracing::info!("{}: client {peer}: {e}", role.name());
                            }
                            drop(permit);
                        });
                    }
                });
                Ok(format!("tcp:{bound}"))
            }
        }
    }

    /// Serves the attenuator over VXI-11: the core channel on a port of the system's choosing,
    /// the portmapper on `portmapper_port` pointing at it. Returns the client's address.
    async fn start_vxi11(&self, ip: IpAddr, portmapper_port: u16) -> std::io::Result<String> {
        let core = TcpListener::bind(SocketAddr::new(ip, 0)).await?;
        let core_port = core.local_addr()?.port();
        let portmapper = TcpListener::bind(SocketAddr::new(ip, portmapper_port)).await.map_err(|e| {
            std::io::Error::new(
                e.kind(),
                format!("the VXI-11 portmapper on port {portmapper_port}: {e} (port 111 needs privileges and a free port; --portmapper-port chooses another)"),
            )
        })?;
        let bound = portmapper.local_addr()?.port();
        // Lookups are capped like the instrument's clients: past the cap, closed at once.
        let lookups = Arc::new(tokio::sync::Semaphore::new(self.max_clients));
        tokio::spawn(async move {
            loop {
                let Ok((stream, peer)) = portmapper.accept().await else {
                    continue;
                };
                let Ok(permit) = lookups.clone().try_acquire_owned() else {
                    tracing::warn!("portmapper: client {peer} refused: too many connected");
                    continue;
                };
                let _ = stream.set_nodelay(true);
                tokio::spawn(async move {
                    if let Err(e) = vxi11::serve_portmapper(stream, core_port).await {
                        tracing::info!("portmapper client: {e}");
                    }
                    drop(permit);
                });
            }
        });
        let me = Arc::new(self.clone());
        let links = Arc::new(vxi11::Links::default());
        let clients = Arc::new(tokio::sync::Semaphore::new(self.max_clients));
        tokio::spawn(async move {
            loop {
                let Ok((stream, peer)) = core.accept().await else {
                    continue;
                };
                let Ok(permit) = clients.clone().try_acquire_owned() else {
                    tracing::warn!(
                        "attenuator (VXI-11): client {peer} refused: too many connected"
                    );
                    continue;
                };
                let _ = stream.set_nodelay(true);
                let (me, links) = (me.clone(), links.clone());
                tokio::spawn(async move {
                    if let Err(e) = vxi11::serve_core(stream, me, links).await {
                        tracing::info!("attenuator (VXI-11): client {peer}: {e}");
                    }
                    drop(permit);
                });
            }
        });
        Ok(crate::instrument::transport::Address::Vxi11 {
            host: ip.to_string(),
            device: "inst0".into(),
            portmapper_port: bound,
        }
        .to_string())
    }

    /// Serves the attenuator over HiSLIP on `socket`. Returns the client's address.
    async fn start_hislip(&self, socket: SocketAddr) -> std::io::Result<String> {
        let listener = TcpListener::bind(socket).await?;
        let bound = listener.local_addr()?;
        let me = Arc::new(self.clone());
        let sessions = Arc::new(hislip::Sessions::default());
        let clients = Arc::new(tokio::sync::Semaphore::new(self.max_clients));
        tokio::spawn(async move {
            loop {
                let Ok((stream, peer)) = listener.accept().await else {
                    continue;
                };
                let _ = stream.set_nodelay(true);
                let (me, sessions, clients) = (me.clone(), sessions.clone(), clients.clone());
                tokio::spawn(async move {
                    if let Err(e) = hislip::serve(stream, me, sessions, clients).await {
                        tracing::info!("attenuator (HiSLIP): client {peer}: {e}");
                    }
                });
            }
        });
        Ok(crate::instrument::transport::Address::Hislip {
            host: bound.ip().to_string(),
            device: "hislip0".into(),
            port: bound.port(),
        }
        .to_string())
    }

    /// What the served attenuator does with one command line, `[sim.faults]` included.
    async fn answer(&self, line: &str, medium: Medium) -> Answer {
        // A query that falls silent is not carried out; a setting has no reply to withhold.
        let fault = self.shared.command_fault("attenuator").ok().flatten();
        match fault {
            Some(CommandFault::Drop) if medium == Medium::Socket => return Answer::HangUp,
            Some(CommandFault::Drop) => return Answer::Nothing,
            Some(CommandFault::Silence) if line.contains('?') => return Answer::Nothing,
            _ => {}
        }
        let (mut response, wall) = match self.attenuator.lock() {
            Ok(mut device) => device.execute(line),
            Err(_) => return Answer::HangUp,
        };
        if fault == Some(CommandFault::Garble) {
            garble(&mut response);
        }
        if !wall.is_zero() {
            tokio::time::sleep(wall).await;
        }
        Answer::Reply(response)
    }

    /// Serves `role` on this process's stdin and stdout until stdin ends, for a client that
    /// runs `taucal sim serve --stdio ROLE` as its instrument (`exec:` addresses). A pipe, like
    /// a terminal, has no connection to drop: a dropped command is lost.
    pub async fn serve_stdio(&self, role: ServedRole) -> std::io::Result<()> {
        let stream = tokio::io::join(tokio::io::stdin(), tokio::io::stdout());
        match role {
            ServedRole::Attenuator => self.serve_scpi(stream, Medium::Terminal).await,
            ServedRole::Dut | ServedRole::SlotDut(_) => {
                let (shared, device) = self.console_of(role)?;
                console::serve(stream, shared, device, Medium::Terminal).await
            }
            ServedRole::Chamber => match self.chamber.clone() {
                Some(controller) => chamber::serve(stream, self.shared.clone(), controller).await,
                None => Err(std::io::Error::other(
                    "the bench has no [sim.chamber] to serve",
                )),
            },
        }
    }

    async fn serve_scpi<S: AsyncRead + AsyncWrite + Unpin>(
        &self,
        mut stream: S,
        medium: Medium,
    ) -> std::io::Result<()> {
        let mut commands = CommandReader::default();
        while let Some(message) = commands.next(&mut stream).await? {
            match self.answer(&message, medium).await {
                Answer::HangUp => return Ok(()),
                Answer::Nothing => {}
                Answer::Reply(response) if response.is_empty() => {}
                Answer::Reply(response) => {
                    stream.write_all(&response).await?;
                    stream.flush().await?;
                }
            }
        }
        Ok(())
    }
}

/// What the served attenuator does with a command.
enum Answer {
    /// Close the connection (an injected drop).
    HangUp,
    /// Nothing: a lost command or a silent query.
    Nothing,
    /// These bytes (empty for a setting).
    Reply(Vec<u8>),
}

#[async_trait::async_trait]
impl message_device::MessageDevice for ServedBench {
    /// Each line of the message is a command, as on the raw socket, so every transport
    /// records the same exchanges; the faults strike per command here too.
    async fn execute(&self, message: &[u8]) -> Option<Vec<u8>> {
        let text = String::from_utf8_lossy(message);
        let mut out = Vec::new();
        for line in text.split('\n') {
            let line = line.trim_end_matches('\r');
            if line.is_empty() {
                continue;
            }
            match self.answer(line, Medium::Socket).await {
                Answer::HangUp => return None,
                Answer::Nothing => {}
                Answer::Reply(response) => out.extend_from_slice(&response),
            }
        }
        Some(out)
    }

    fn status_byte(&self) -> u8 {
        let reply = match self.attenuator.lock() {
            Ok(mut device) => device.execute("*STB?").0,
            Err(_) => return 0,
        };
        String::from_utf8_lossy(&reply).trim().parse().unwrap_or(0)
    }
}

/// Reads a served instrument's commands, a line at a time, as an instrument does: a line that
/// is not text is dropped, and the client closing the connection ends the commands.
#[derive(Default)]
pub struct CommandReader {
    framer: LineFramer,
}

impl CommandReader {
    /// The next command line; `None` once the client has closed the connection.
    pub async fn next<S: AsyncRead + Unpin>(
        &mut self,
        stream: &mut S,
    ) -> std::io::Result<Option<String>> {
        let mut buf = [0u8; 1024];
        loop {
            match self.framer.next_line() {
                Ok(Some(line)) => return Ok(Some(line)),
                Ok(None) => {}
                Err(_) => self.framer.clear(),
            }
            let n = stream.read(&mut buf).await?;
            if n == 0 {
                return Ok(None);
            }
            self.framer.push(&buf[..n]);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sim::truth::SimFaultsTruth;
    use std::time::Duration;
    use tokio::io::{AsyncBufReadExt, BufReader};
    use tokio::net::TcpStream;

    /// The built-in bench served on loopback with `faults`; returns the address of `role`.
    async fn serve(faults: SimFaultsTruth, role: ServedRole) -> SocketAddr {
        let mut bench = Bench::built_in().expect("demo bench");
        if let Some(sim) = bench.sim.as_mut() {
            sim.faults = faults;
        }
        let served = ServedBench::new(&bench, 1, false).expect("served");
        let listen = Listen {
            role,
            at: ListenAt::Tcp(SocketAddr::from(([127, 0, 0, 1], 0))),
        };
        let address = served.start(&listen).await.expect("listening");
        address
            .trim_start_matches("tcp:")
            .parse()
            .expect("socket address")
    }

    /// One client connection: sends lines, reads lines with a short wait.
    struct Client {
        reader: BufReader<tokio::net::tcp::OwnedReadHalf>,
        writer: tokio::net::tcp::OwnedWriteHalf,
    }

    impl Client {
        async fn connect(at: SocketAddr) -> Client {
            let (r, w) = TcpStream::connect(at).await.expect("connect").into_split();
            Client {
                reader: BufReader::new(r),
                writer: w,
            }
        }

        async fn send(&mut self, line: &str) {
            self.writer
                .write_all(format!("{line}\r\n").as_bytes())
                .await
                .expect("send");
        }

        /// The next line; `None` when nothing comes within 300 ms, `Some("<closed>")` at EOF.
        async fn line(&mut self) -> Option<String> {
            let mut line = String::new();
            match tokio::time::timeout(Duration::from_millis(300), self.reader.read_line(&mut line))
                .await
            {
                Err(_) => None,
                Ok(Ok(0)) => Some("<closed>".into()),
                Ok(_) => Some(line.trim_end().to_string()),
            }
        }

        /// Reads past the greeting banner a console sends on connecting.
        async fn skip_greeting(&mut self) {
            for line in BANNER_LINES {
                assert_eq!(self.line().await.as_deref(), Some(line));
            }
        }
    }

    const BANNER_LINES: [&str; 3] = console::BANNER;

    #[tokio::test]
    async fn every_nth_command_finds_the_connection_dropped_before_it_is_carried_out() {
        let faults = SimFaultsTruth {
            drop_connection_every: 3,
            ..SimFaultsTruth::default()
        };
        let at = serve(faults, ServedRole::Attenuator).await;
        let mut c = Client::connect(at).await;
        c.send("DAMP:SETT 30").await;
        c.send("DAMP:SETT?").await;
        assert_eq!(c.line().await.as_deref(), Some("30.0"));
        c.send("DAMP:SETT 40").await;
        assert_eq!(c.line().await.as_deref(), Some("<closed>"));
        let mut again = Client::connect(at).await;
        again.send("DAMP:SETT?").await;
        assert_eq!(
            again.line().await.as_deref(),
            Some("30.0"),
            "40 was never set"
        );
    }

    #[tokio::test]
    async fn a_silent_query_is_not_answered_and_a_setting_still_takes_effect() {
        let faults = SimFaultsTruth {
            reply_timeout_rate: 0.5,
            ..SimFaultsTruth::default()
        };
        let at = serve(faults, ServedRole::Attenuator).await;
        let mut c = Client::connect(at).await;
        for db in ["12.5", "20.0", "31.25", "47.0"] {
            c.send(&format!("DAMP:SETT {db}")).await;
        }
        let mut replies = Vec::new();
        for _ in 0..12 {
            c.send("DAMP:SETT?").await;
            replies.push(c.line().await);
        }
        assert!(replies.contains(&None), "{replies:?}");
        assert!(
            replies.iter().flatten().all(|r| r == "47.0"),
            "every answer is the last setting: {replies:?}"
        );
        assert!(replies.iter().flatten().count() >= 1, "{replies:?}");
    }

    #[tokio::test]
    async fn garbled_replies_keep_their_line_ends_and_the_burst_its_other_lines() {
        let faults = SimFaultsTruth {
            garbled_reply_rate: 0.5,
            ..SimFaultsTruth::default()
        };
        let at = serve(faults, ServedRole::Dut).await;
        let mut c = Client::connect(at).await;
        c.skip_greeting().await;
        let mut halts = Vec::new();
        for _ in 0..8 {
            c.send("range halt").await;
            halts.push(c.line().await.unwrap_or_default());
        }
        assert!(halts.iter().all(|l| l == "ok" || l == "#k"), "{halts:?}");
        assert!(halts.iter().any(|l| l == "#k"), "{halts:?}");
        let mut garbled_bursts = 0;
        for _ in 0..8 {
            c.send("range go n=3 ch=5180 bw=80").await;
            let mut lines = Vec::new();
            for _ in 0..5 {
                lines.push(c.line().await.unwrap_or_default());
            }
            // ack, three records, end: only the middle line (the second record) may be garbled.
            assert_eq!(lines[0], "range ack");
            assert!(lines[1].starts_with("xr 0 "), "{lines:?}");
            assert!(lines[3].starts_with("xr 2 "), "{lines:?}");
            assert_eq!(lines[4], "range done n=3");
            if lines[2].starts_with("#r#1#") {
                garbled_bursts += 1;
            } else {
                assert!(lines[2].starts_with("xr 1 "), "{lines:?}");
            }
        }
        assert!(garbled_bursts >= 1);
    }

    #[tokio::test]
    async fn a_restarted_console_prints_its_banner_and_wants_identifying_again() {
        let faults = SimFaultsTruth {
            dut_restart_every: 30,
            ..SimFaultsTruth::default()
        };
        let at = serve(faults, ServedRole::Dut).await;
        let mut c = Client::connect(at).await;
        c.skip_greeting().await;
        c.send("range go n=16 ch=5180 bw=80").await;
        assert_eq!(c.line().await.as_deref(), Some("range ack"));
        for _ in 0..17 {
            assert!(c.line().await.is_some());
        }
        // The next burst crosses exchange 30: the module reboots instead of answering.
        c.send("range go n=16 ch=5180 bw=80").await;
        c.skip_greeting().await;
        c.send("range go n=16 ch=5180 bw=80").await;
        assert!(c
            .line()
            .await
            .is_some_and(|l| l.starts_with("range fail") && l.contains("restarted")));
        c.send("who").await;
        assert!(c.line().await.is_some_and(|l| l.starts_with("id ")));
        c.send("range go n=16 ch=5180 bw=80").await;
        assert_eq!(c.line().await.as_deref(), Some("range ack"));
    }
}
