//! `cargo bench --bench visa`: a query's round trip through taucal's VXI-11 and HiSLIP clients
//! against a raw socket's, to the same served attenuator (README, Performance). One
//! `ServedBench` listens on all three at once (the server's runtime as `sim serve` builds it);
//! the client is a `Link` on a current-thread runtime, as an instrument's handle runs it. Each
//! round times a batch of `DAMP:SETT?` queries on every transport in turn (the order rotates);
//! each transport's time per query is divided by the raw socket's in the same round, and the
//! figure is the median of those ratios over rounds (min–max beside it); target ≤ 1.3 for both.
//! A raw-socket query is a line out and a line back; VXI-11's is device_write and device_read
//! sent together (one round trip), and, for comparison, the two one after the other (two round
//! trips).
//!
//! `--smoke` (CI) runs 60 rounds of 50 queries; the default 200 rounds of 200 (short rounds, so
//! the transports of one round see the same load).

use std::net::{IpAddr, Ipv4Addr, SocketAddr};
use std::time::{Duration, Instant};
use taucal::bench::Bench;
use taucal::instrument::transport::{Address, Link};
use taucal::sim::serve::{Listen, ListenAt, ServedBench, ServedRole};

type Error = Box<dyn std::error::Error>;

const TARGET_RATIO: f64 = 1.3;
const QUERY: &str = "DAMP:SETT?";

fn main() -> Result<(), Error> {
    let smoke = std::env::args().any(|a| a == "--smoke");
    let (rounds, batch) = if smoke { (60, 50) } else { (200, 200) };
    let server = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()?;
    let bench = Bench::built_in()?;
    let served = ServedBench::new(&bench, 1, false)?.with_portmapper_port(0);
    let loopback = IpAddr::V4(Ipv4Addr::LOCALHOST);
    let addresses: Vec<String> = server.block_on(async {
        let mut out = Vec::new();
        for at in [
            ListenAt::Tcp(SocketAddr::new(loopback, 0)),
            ListenAt::Vxi11 {
                ip: loopback,
                portmapper_port: None,
            },
            ListenAt::Hislip(SocketAddr::new(loopback, 0)),
        ] {
            let listen = Listen {
                role: ServedRole::Attenuator,
                at,
            };
            out.push(served.start(&listen).await?);
        }
        Ok::<_, std::io::Error>(out)
    })?;
    let client = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()?;
    let names = ["raw socket", "VXI-11", "HiSLIP", "VXI-11, write then read"];
    let mut links: Vec<Link> = [0, 1, 2, 1]
        .iter()
        .map(|&i| {
            let address = Address::parse(&addresses[i])?;
            Ok(Link::new(address, "\n", Duration::from_secs(5)))
        })
        .collect::<Result<_, Error>>()?;
    println!(
        "visa bench: `{QUERY}` to one served attenuator at {}, {rounds} rounds of {batch} queries",
        addresses.join(", ")
    );
    let mut per_query_us: Vec<Vec<f64>> = vec![Vec::new(); links.len()];
    client.block_on(async {
        // Connect, look up, create links and warm every path before timing.
        for link in links.iter_mut() {
            for _ in 0..100 {
                link.query(QUERY).await?;
            }
        }
        for round in 0..rounds {
            for k in 0..links.len() {
                let i = (round + k) % links.len();
                let link = &mut links[i];
                let start = Instant::now();
                for _ in 0..batch {
                    let reply = if i == 3 {
                        link.send(QUERY).await?;
                        link.read_line().await?
                    } else {
                        link.query(QUERY).await?
                    };
                    if reply.is_empty() {
                        return Err("an empty reply".into());
                    }
                }
                per_query_us[i].push(start.elapsed().as_secs_f64() * 1e6 / batch as f64);
            }
        }
        Ok::<(), Error>(())
    })?;
    // Ratios within a round: the machine's speed drifts between rounds, not within one.
    let mut ratios: Vec<Vec<f64>> = per_query_us
        .iter()
        .map(|v| {
            v.iter()
                .zip(&per_query_us[0])
                .map(|(t, raw)| t / raw)
                .collect()
        })
        .collect();
    let medians: Vec<f64> = per_query_us.iter_mut().map(|v| median(v)).collect();
    let mut over = Vec::new();
    for (i, name) in names.iter().enumerate() {
        let ratio = median(&mut ratios[i]);
        let (low, high) = (ratios[i][0], ratios[i][ratios[i].len() - 1]);
        let note = match i {
            1 | 2 => format!(" (target ≤ {TARGET_RATIO})"),
            _ => String::new(),
        };
        println!(
            "{name:<24} {:>8.1} µs a query, {ratio:.2}× the raw socket ({low:.2}–{high:.2}){note}",
            medians[i]
        );
        if matches!(i, 1 | 2) && ratio > TARGET_RATIO {
            over.push(format!("{name} {ratio:.2}×"));
        }
    }
    server.shutdown_timeout(Duration::from_millis(200));
    if !over.is_empty() {
        return Err(format!("above the target {TARGET_RATIO}: {}", over.join(", ")).into());
    }
    Ok(())
}

fn median(v: &mut [f64]) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        (v[n / 2 - 1] + v[n / 2]) / 2.0
    }
}
