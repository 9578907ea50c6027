//! Following a run directory as its files grow: the exchanges appended since the last look,
//! the manifest when it is rewritten, the log's last lines.
//!
//! Only whole lines are read (the runner flushes whole bursts). A file that shrank, was
//! replaced, or no longer holds the bytes last read there (a resumed run cuts its record back to
//! a checkpoint and records again) is read again from its start. Reads only: the run's files are
//! never written or locked here.

use crate::data::csv_io::read_from;
use crate::data::run_dir::files;
use crate::data::{Exchange, Manifest};
use std::collections::VecDeque;
use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};
use std::time::SystemTime;

/// Log lines kept for the page.
pub const LOG_LINES: usize = 40;

/// A text file read as it grows, line by line.
#[derive(Debug, Default)]
struct Tail {
    /// Bytes consumed (whole lines).
    offset: u64,
    /// The last whole line consumed, to see that the file still holds it.
    last_line: Vec<u8>,
    /// The file's identity (inode) when it was read.
    inode: Option<u64>,
}

/// What a look found.
#[derive(Debug, Default, Clone, Copy, PartialEq, Eq)]
pub struct Changes {
    /// Rows were added, or the record was read again from its start.
    pub rows: bool,
    /// The manifest was rewritten.
    pub manifest: bool,
    /// The log grew.
    pub log: bool,
}

impl Tail {
    /// The whole lines added since the last call, and whether the file was read from its start
    /// again (what was read before no longer stands).
    fn read_new(&mut self, path: &Path) -> std::io::Result<(Vec<u8>, bool)> {
        let mut file = match File::open(path) {
            Ok(f) => f,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                let restarted = self.offset > 0;
                *self = Tail::default();
                return Ok((Vec::new(), restarted));
            }
            Err(e) => return Err(e),
        };
        let meta = file.metadata()?;
        let inode = inode(&meta);
        let mut restarted = false;
        if self.offset > 0
            && (inode != self.inode || meta.len() < self.offset || !self.holds(&mut file)?)
        {
            *self = Tail::default();
            restarted = true;
        }
        self.inode = inode;
        if meta.len() == self.offset {
            return Ok((Vec::new(), restarted));
        }
        file.seek(SeekFrom::Start(self.offset))?;
        let mut fresh = Vec::new();
        file.take(meta.len() - self.offset)
            .read_to_end(&mut fresh)?;
        let Some(end) = fresh.iter().rposition(|b| *b == b'\n') else {
            return Ok((Vec::new(), restarted));
        };
        fresh.truncate(end + 1);
        self.offset += fresh.len() as u64;
        let start = fresh[..end]
            .iter()
            .rposition(|b| *b == b'\n')
            .map_or(0, |i| i + 1);
        self.last_line = fresh[start..].to_vec();
        Ok((fresh, restarted))
    }

    /// Whether the file still holds the last line read, where it was read.
    fn holds(&self, file: &mut File) -> std::io::Result<bool> {
        let at = self.offset - self.last_line.len() as u64;
        file.seek(SeekFrom::Start(at))?;
        let mut buf = vec![0; self.last_line.len()];
        match file.read_exact(&mut buf) {
            Ok(()) => Ok(buf == self.last_line),
            Err(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => Ok(false),
            Err(e) => Err(e),
        }
    }
}

#[cfg(unix)]
fn inode(meta: &std::fs::Metadata) -> Option<u64> {
    use std::os::unix::fs::MetadataExt;
    Some(meta.ino())
}

#[cfg(not(unix))]
fn inode(_: &std::fs::Metadata) -> Option<u64> {
    None
}

/// A run directory followed from outside the run.
#[derive(Debug)]
pub struct RunFollower {
    dir: PathBuf,
    exchanges: Tail,
    header: Option<String>,
    rows: Vec<Exchange>,
    unreadable: Option<String>,
    manifest: Option<Manifest>,
    manifest_stamp: Option<(SystemTime, u64)>,
    log: Tail,
    log_lines: VecDeque<String>,
}

impl RunFollower {
    /// Follows `dir`; nothing is read until [`poll`](Self::poll).
    pub fn new(dir: &Path) -> RunFollower {
        RunFollower {
            dir: dir.to_path_buf(),
            exchanges: Tail::default(),
            header: None,
            rows: Vec::new(),
            unreadable: None,
            manifest: None,
            manifest_stamp: None,
            log: Tail::default(),
            log_lines: VecDeque::new(),
        }
    }

    /// The run directory.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// Reads what changed since the last look.
    pub fn poll(&mut self) -> std::io::Result<Changes> {
        let mut changes = Changes::default();
        let (fresh, restarted) = self.exchanges.read_new(&self.dir.join(files::EXCHANGES))?;
        if restarted {
            self.rows.clear();
            self.header = None;
            self.unreadable = None;
            changes.rows = true;
        }
        if !fresh.is_empty() {
            changes.rows |= self.take_rows(&fresh);
        }
        let manifest_path = self.dir.join(files::MANIFEST);
        if let Ok(meta) = std::fs::metadata(&manifest_path) {
            let stamp = (meta.modified()?, meta.len());
            if self.manifest_stamp != Some(stamp) {
                // Written whole and renamed into place by the runner, so a read sees one
                // version; one that does not parse is kept from the last look.
                if let Ok(m) = Manifest::read(&manifest_path) {
                    self.manifest = Some(m);
                    self.manifest_stamp = Some(stamp);
                    changes.manifest = true;
                }
            }
        }
        let (fresh, restarted) = self.log.read_new(&self.dir.join(files::LOG))?;
        if restarted {
            self.log_lines.clear();
            changes.log = true;
        }
        if !fresh.is_empty() {
            for line in String::from_utf8_lossy(&fresh).lines() {
                self.log_lines.push_back(line.to_string());
                if self.log_lines.len() > LOG_LINES {
                    self.log_lines.pop_front();
                }
            }
            changes.log = true;
        }
        Ok(changes)
    }

    /// Parses whole lines of the exchanges file (the first is its header).
    fn take_rows(&mut self, fresh: &[u8]) -> bool {
        let text = String::from_utf8_lossy(fresh);
        let mut lines = text.as_ref();
        if self.header.is_none() {
            let (head, rest) = lines.split_once('\n').unwrap_or((lines, ""));
            self.header = Some(head.trim_end_matches('\r').to_string());
            lines = rest;
        }
        if lines.is_empty() {
            return false;
        }
        let header = self.header.as_deref().unwrap_or_default();
        let chunk = format!("{header}\n{lines}");
        let name = self.dir.join(files::EXCHANGES).display().to_string();
        let before = self.rows.len();
        match read_from(chunk.as_bytes(), name) {
            Ok(reader) => {
                for row in reader {
                    match row {
                        Ok(r) => self.rows.push(r),
                        Err(e) => {
                            // Rows after a bad one are not trusted to line up either.
                            self.unreadable = Some(e.to_string());
                            break;
                        }
                    }
                }
            }
            Err(e) => self.unreadable = Some(e.to_string()),
        }
        self.rows.len() != before
    }

    /// The exchanges recorded so far.
    pub fn rows(&self) -> &[Exchange] {
        &self.rows
    }

    /// The latest manifest, once there is one.
    pub fn manifest(&self) -> Option<&Manifest> {
        self.manifest.as_ref()
    }

    /// The last rows that could not be read, if any (shown, never fatal).
    pub fn unreadable(&self) -> Option<&str> {
        self.unreadable.as_deref()
    }

    /// The log's last lines.
    pub fn log_lines(&self) -> impl Iterator<Item = &str> {
        self.log_lines.iter().map(String::as_str)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Write;

    const HEADER: &str = "stage,point,burst,seq,atten_db,center_mhz,bw_mhz,t1_ps,t2_ps,t3_ps,t4_ps,dut_gain,dut_rssi_dbm,ref_gain,temp_c,status";

    fn line(burst: u32, seq: u32) -> String {
        format!("sweep,0,{burst},{seq},10,5180,80,1,2,3,4,0,-40,0,,ok\n")
    }

    #[test]
    fn only_whole_lines_are_read_and_a_cut_record_is_read_again() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join(files::EXCHANGES);
        let mut f = File::create(&path).unwrap();
        write!(f, "{HEADER}\n{}{}", line(0, 0), line(0, 1)).unwrap();
        // Half a line: the writer has not finished it.
        write!(f, "sweep,0,1,0,10,51").unwrap();
        f.flush().unwrap();
        let mut follow = RunFollower::new(dir.path());
        assert!(follow.poll().unwrap().rows);
        assert_eq!(follow.rows().len(), 2);
        assert!(!follow.poll().unwrap().rows, "nothing new");
        writeln!(f, "80,80,1,2,3,4,0,-40,0,,ok").unwrap();
        f.flush().unwrap();
        assert!(follow.poll().unwrap().rows);
        assert_eq!(follow.rows().len(), 3);
        assert_eq!(follow.rows()[2].burst, 1);

        // A resume cuts the record back to its first burst and records again, past the length
        // read before: the rows are read again from the start.
        drop(f);
        let redo = format!(
            "{HEADER}\n{}{}{}{}",
            line(0, 0),
            line(0, 1),
            line(7, 0),
            line(7, 1)
        );
        std::fs::write(&path, redo).unwrap();
        assert!(follow.poll().unwrap().rows);
        let bursts: Vec<u32> = follow.rows().iter().map(|r| r.burst).collect();
        assert_eq!(bursts, vec![0, 0, 7, 7]);
        assert!(follow.unreadable().is_none());
    }

    #[test]
    fn the_log_keeps_its_last_lines() {
        let dir = tempfile::tempdir().unwrap();
        let text: String = (0..100).map(|i| format!("line {i}\n")).collect();
        std::fs::write(dir.path().join(files::LOG), text).unwrap();
        let mut follow = RunFollower::new(dir.path());
        assert!(follow.poll().unwrap().log);
        let lines: Vec<&str> = follow.log_lines().collect();
        assert_eq!(lines.len(), LOG_LINES);
        assert_eq!(lines[LOG_LINES - 1], "line 99");
    }
}
