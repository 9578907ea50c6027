//! `taucal path-delay`: a measured path's group delay per channel, from a Touchstone file, to
//! look at before naming the file in a bench's `[path] touchstone` (or copying a number into
//! `cable_delay_ps`).

use super::args::PathDelayArgs;
use super::{csv_file, Exit};
use crate::diagnostic::Diagnostic;
use crate::touchstone::{band_delay, parse};

/// Reads the file, prints one line per channel.
pub fn run(args: PathDelayArgs) -> Result<Exit, Diagnostic> {
    let mut channels = Vec::new();
    for text in &args.channels {
        let parsed = text
            .split_once('/')
            .and_then(|(c, b)| Some((c.trim().parse::<f64>().ok()?, b.trim().parse::<f64>().ok()?)))
            .filter(|(c, b)| c.is_finite() && b.is_finite() && *c > 0.0 && *b > 0.0 && b < c);
        match parsed {
            Some(ch) => channels.push(ch),
            None => {
                return Err(
                    Diagnostic::plain(format!("--channel {text} is not CENTER_MHZ/BW_MHZ"))
                        .with_hint("e.g. --channel 5180/80 (center 5180 MHz, 80 MHz wide)"),
                )
            }
        }
    }
    let file = csv_file::load(&args.file)?;
    let name = args
        .file
        .file_name()
        .map(|n| n.to_string_lossy().to_ascii_lowercase())
        .unwrap_or_default();
    // A .sNp file says its port count only in its name (version 1.x).
    let ports = name
        .rsplit_once(".s")
        .and_then(|(_, ext)| ext.strip_suffix('p'))
        .and_then(|n| n.parse::<usize>().ok());
    let net = parse(&file.text, ports).map_err(|e| {
        let start = file
            .text
            .split_inclusive('\n')
            .take(e.line.saturating_sub(1))
            .map(str::len)
            .sum::<usize>();
        csv_file::at_line(&file, start as u64, e.message.clone())
            .with_hint("a Touchstone file: `# HZ|KHZ|MHZ|GHZ S RI|MA|DB R 50`, then rows of a frequency and its S-parameters")
    })?;
    if net.ports < 2 {
        return Err(Diagnostic::in_file(
            &args.file,
            "a one-port file measures a reflection, not the path's transmission",
        )
        .with_hint("measure the path as a two-port (S21 and S12) and save it as .s2p"));
    }
    let ways = [(2, 1), (1, 2)];
    println!("center_mhz,bw_mhz,s21_delay_ps,s12_delay_ps,ripple_u_ps,points");
    for (center, bw) in channels {
        let (lo, hi) = ((center - bw / 2.0) * 1e6, (center + bw / 2.0) * 1e6);
        let mut delays = Vec::new();
        let mut ripple_u: f64 = 0.0;
        let mut points = 0;
        for (to, from) in &ways {
            let b = band_delay(&net.freq_hz, &net.sij(*to, *from), lo, hi).map_err(|why| {
                Diagnostic::in_file(&args.file, format!("channel {center}/{bw}: {why}"))
                    .with_hint("measure the path over every channel the recipe uses")
            })?;
            delays.push(b.mean_s * 1e12);
            ripple_u = ripple_u.max(b.u_ripple_s * 1e12);
            points = b.points;
        }
        println!(
            "{center},{bw},{:.3},{:.3},{:.3},{points}",
            delays[0], delays[1], ripple_u
        );
    }
    Ok(Exit::Ok)
}
