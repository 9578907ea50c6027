//! The run's journal: one line per completed point, written after the point's exchanges are
//! synced to disk. `taucal resume` keeps the exchanges up to the last line and redoes the rest.

use std::fs::{File, OpenOptions};
use std::io::{self, BufRead, BufReader, Write};
use std::path::Path;

/// Where the run stood at a point boundary.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Checkpoint {
    /// Exchanges recorded so far.
    pub rows: u64,
    /// Bench time, ps.
    pub bench_ps: u64,
}

/// Appends checkpoints, synced.
pub struct Journal {
    file: File,
}

impl Journal {
    /// Opens (creating if needed) the journal for appending.
    pub fn open(path: &Path) -> io::Result<Journal> {
        let file = OpenOptions::new().create(true).append(true).open(path)?;
        Ok(Journal { file })
    }

    /// Records a checkpoint and syncs it.
    pub fn append(&mut self, c: Checkpoint) -> io::Result<()> {
        writeln!(
            self.file,
            "checkpoint rows={} bench_ps={}",
            c.rows, c.bench_ps
        )?;
        self.file.sync_data()
    }
}

/// The last complete checkpoint of a journal (a torn last line, from a crash mid-write, is
/// ignored). `None` when there is none or no journal.
pub fn last_checkpoint(path: &Path) -> io::Result<Option<Checkpoint>> {
    let file = match File::open(path) {
        Ok(f) => f,
        Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(e),
    };
    let mut last = None;
    for line in BufReader::new(file).lines() {
        if let Some(c) = parse(&line?) {
            last = Some(c);
        }
    }
    Ok(last)
}

fn parse(line: &str) -> Option<Checkpoint> {
    let mut words = line.split_whitespace();
    (words.next()? == "checkpoint").then_some(())?;
    let rows = words.next()?.strip_prefix("rows=")?.parse().ok()?;
    let bench_ps = words.next()?.strip_prefix("bench_ps=")?.parse().ok()?;
    words
        .next()
        .is_none()
        .then_some(Checkpoint { rows, bench_ps })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_last_whole_line_wins_and_a_torn_one_is_ignored() {
        let dir = tempfile::tempdir().expect("tempdir");
        let path = dir.path().join("journal.log");
        assert_eq!(last_checkpoint(&path).expect("read"), None);
        let mut j = Journal::open(&path).expect("open");
        j.append(Checkpoint {
            rows: 16,
            bench_ps: 5,
        })
        .expect("append");
        j.append(Checkpoint {
            rows: 48,
            bench_ps: 9,
        })
        .expect("append");
        drop(j);
        std::fs::OpenOptions::new()
            .append(true)
            .open(&path)
            .and_then(|mut f| f.write_all(b"checkpoint rows=6"))
            .expect("torn write");
        assert_eq!(
            last_checkpoint(&path).expect("read"),
            Some(Checkpoint {
                rows: 48,
                bench_ps: 9
            })
        );
    }
}
