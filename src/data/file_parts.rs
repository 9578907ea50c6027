//! An exchanges file in parts, split where one burst ends and the next begins, so that the
//! parts can be read and fitted on several threads at once.
//!
//! Each split is found by looking at the lines after an even cut as bytes. That is right only
//! if no quote before them opened a field that runs across line ends; whether a part holds a
//! quote is known once it is read ([`ExchangeRows::all_plain`]), and the caller then reads the
//! file whole instead. Nothing here reports an error: any trouble means "read the file whole",
//! and that reader reports it, with its line and column.

use super::csv_io::{read_from, ExchangeRows};
use std::fs::File;
use std::io::{self, Read, Seek, SeekFrom};
use std::path::Path;

/// How much of the file after a cut is searched for a burst boundary. A burst is a few dozen
/// lines; a cut with none within 1 MiB is dropped.
const LOOK_BYTES: u64 = 1 << 20;

/// The longest header searched for its line end.
const HEADER_BYTES: u64 = 64 * 1024;

/// What a part is read from: the header (for every part but the first, which starts with its
/// own), then the part's lines.
pub type PartReader = io::Chain<io::Cursor<Vec<u8>>, io::Take<File>>;

/// Splits the file at `path` into up to `parts` parts of about equal size, each cut moved on to
/// the first burst boundary after it; `None` if the file is shorter than `min_bytes` or no cut
/// found a boundary. A cut is dropped where the lines after it are not plain enough to tell (a
/// quote, a blank line, a bare CR, a field count other than the header's, a burst or point
/// not written as plain decimal digits) or hold no boundary.
pub fn split_at_bursts(
    path: &Path,
    min_bytes: u64,
    parts: usize,
) -> Option<Vec<ExchangeRows<PartReader>>> {
    let mut file = File::open(path).ok()?;
    let len = file.metadata().ok()?.len();
    if len < min_bytes.max(1) {
        return None;
    }
    let mut head = Vec::new();
    file.by_ref()
        .take(HEADER_BYTES)
        .read_to_end(&mut head)
        .ok()?;
    let header_len = head.iter().position(|&b| b == b'\n')? + 1;
    head.truncate(header_len);
    let columns = KeyColumns::find(&head)?;
    let mut starts = vec![0];
    for k in 1..parts as u64 {
        let cut = len / parts as u64 * k;
        let Some(start) = columns.burst_after(&mut file, cut) else {
            continue;
        };
        if start > header_len as u64 && starts.last().is_some_and(|&last| start > last) {
            starts.push(start);
        }
    }
    if starts.len() < 2 {
        return None;
    }
    starts.push(len);
    let name = path.display().to_string();
    starts
        .windows(2)
        .enumerate()
        .map(|(i, span)| {
            let mut part = File::open(path).ok()?;
            part.seek(SeekFrom::Start(span[0])).ok()?;
            let header = if i == 0 { Vec::new() } else { head.clone() };
            let bytes = io::Cursor::new(header).chain(part.take(span[1] - span[0]));
            read_from(bytes, name.clone()).ok()
        })
        .collect()
}

/// Where a burst's key lies in a line: the header's field count and the columns of stage,
/// point and burst.
struct KeyColumns {
    fields: usize,
    key: [usize; 3],
}

impl KeyColumns {
    /// The key columns of a header line (its line end included); `None` if it has a quote or
    /// lacks one of them.
    fn find(header: &[u8]) -> Option<Self> {
        if header.contains(&b'"') {
            return None;
        }
        let names: Vec<&[u8]> = line_body(header).split(|&b| b == b',').collect();
        let at = |name: &str| names.iter().position(|&n| n == name.as_bytes());
        Some(KeyColumns {
            fields: names.len(),
            key: [at("stage")?, at("point")?, at("burst")?],
        })
    }

    /// Where in the file the first line after `cut` starts whose burst differs from the line
    /// before (see [`first_new_burst`](KeyColumns::first_new_burst)).
    fn burst_after(&self, file: &mut File, cut: u64) -> Option<u64> {
        file.seek(SeekFrom::Start(cut)).ok()?;
        let mut window = Vec::new();
        file.take(LOOK_BYTES).read_to_end(&mut window).ok()?;
        Some(cut + self.first_new_burst(&window)? as u64)
    }

    /// Where in `window` (which may start and end mid-line) the first line whose burst differs
    /// from the line before starts; only whole lines after the first line end count.
    fn first_new_burst(&self, window: &[u8]) -> Option<usize> {
        let mut start = window.iter().position(|&b| b == b'\n')? + 1;
        let mut before: Option<[&[u8]; 3]> = None;
        while let Some(len) = window[start..].iter().position(|&b| b == b'\n') {
            let key = self.key_of(&window[start..start + len + 1])?;
            if before.is_some_and(|b| b != key) {
                return Some(start);
            }
            before = Some(key);
            start += len + 1;
        }
        None
    }

    /// A line's stage, point and burst as written; `None` unless the line is plain (no quote,
    /// no bare CR, the header's field count) and point and burst are plain decimal digits, so
    /// that two keys are the same burst exactly when their bytes are equal.
    fn key_of<'a>(&self, line: &'a [u8]) -> Option<[&'a [u8]; 3]> {
        let body = line_body(line);
        if body.contains(&b'\r') || body.contains(&b'"') {
            return None;
        }
        let fields: Vec<&[u8]> = body.split(|&b| b == b',').collect();
        if fields.len() != self.fields {
            return None;
        }
        let [stage, point, burst] = self.key.map(|i| fields[i]);
        (plain_count(point) && plain_count(burst)).then_some([stage, point, burst])
    }
}

/// A line without its line end (LF or CR LF).
fn line_body(line: &[u8]) -> &[u8] {
    let line = line.strip_suffix(b"\n").unwrap_or(line);
    line.strip_suffix(b"\r").unwrap_or(line)
}

/// One to nine decimal digits without a leading zero (or `0` itself): the one spelling of its
/// value.
fn plain_count(field: &[u8]) -> bool {
    (1..=9).contains(&field.len())
        && field.iter().all(u8::is_ascii_digit)
        && (field == b"0" || field[0] != b'0')
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::{read_exchanges, Exchange, EXCHANGES_HEADER};

    /// A line in the contract's order: stage, point, burst, seq, then plain values.
    fn line(stage: &str, point: u32, burst: u32, seq: u32) -> String {
        format!(
            "{stage},{point},{burst},{seq},24.0,5180,20,{},{},{},{},0,-17.5,0,,ok\n",
            1000 + seq,
            2000 + seq,
            3000 + seq,
            4000 + seq
        )
    }

    /// A file of `bursts` bursts of `per_burst` lines each.
    fn file_text(bursts: u32, per_burst: u32) -> String {
        let mut text = EXCHANGES_HEADER.join(",") + "\n";
        for burst in 0..bursts {
            for seq in 0..per_burst {
                text.push_str(&line("sweep", burst / 4, burst, seq));
            }
        }
        text
    }

    fn written(text: &str) -> (tempfile::TempDir, std::path::PathBuf) {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("exchanges.csv");
        std::fs::write(&path, text).expect("write");
        (dir, path)
    }

    fn rows<R: Read>(mut rows: ExchangeRows<R>) -> Vec<Exchange> {
        let mut out = Vec::new();
        let mut row = Exchange::default();
        while rows.read_into(&mut row).expect("plain rows") {
            out.push(row.clone());
        }
        assert!(rows.all_plain());
        out
    }

    /// Every part's rows, in order, each part checked to start a new burst.
    fn rows_of_parts(parts: Vec<ExchangeRows<PartReader>>) -> Vec<Exchange> {
        let mut all: Vec<Exchange> = Vec::new();
        for part in parts {
            let part = rows(part);
            if let (Some(last), Some(next)) = (all.last(), part.first()) {
                assert_ne!((last.point, last.burst), (next.point, next.burst));
                assert_eq!(next.seq, 0);
            }
            all.extend(part);
        }
        all
    }

    /// The file read whole by the ordinary reader: the reference for the parts.
    fn whole(path: &Path) -> Vec<Exchange> {
        let rows = read_exchanges(path).expect("open");
        rows.map(|row| row.expect("a plain row")).collect()
    }

    #[test]
    fn the_parts_hold_the_files_rows_split_where_bursts_begin() {
        let (_dir, path) = written(&file_text(40, 7));
        for parts in [2, 3, 8] {
            let split = split_at_bursts(&path, 0, parts).expect("a split");
            assert_eq!(split.len(), parts);
            assert_eq!(rows_of_parts(split), whole(&path), "{parts} parts");
        }
    }

    #[test]
    fn crlf_lines_split_too() {
        let (_dir, path) = written(&file_text(40, 7).replace('\n', "\r\n"));
        let split = split_at_bursts(&path, 0, 4).expect("a split");
        assert_eq!(rows_of_parts(split), whole(&path));
    }

    #[test]
    fn cuts_with_nothing_to_go_by_are_dropped() {
        let plain = file_text(40, 7);
        let (_dir, path) = written(&plain);
        let too_short = plain.len() as u64 + 1;
        assert!(split_at_bursts(&path, too_short, 2).is_none(), "too short");
        assert!(split_at_bursts(&path, 0, 1).is_none(), "one part");
        // Into the first whole line after the middle cut (of the file one byte longer).
        let cut = (plain.len() as u64 + 1) / 4 * 2;
        let line_end = plain[cut as usize..].find('\n').expect("a line end") + cut as usize;
        let quoted = format!("{}\"{}", &plain[..line_end + 5], &plain[line_end + 5..]);
        let unusual = [
            ("a quote", quoted),
            ("a point spelt 05", plain.replace("sweep,5,", "sweep,05,")),
            ("a blank line", plain.replace("ok\n", "ok\n\n")),
            ("a bare CR", plain.replace(",24.0,", ",24\r0,")),
            ("one burst", file_text(1, 400)),
        ];
        for (what, text) in &unusual {
            let (_dir, path) = written(text);
            assert!(split_at_bursts(&path, 0, 2).is_none(), "{what}");
        }
        // Of three cuts, only the one that meets the quote is dropped.
        let (_dir, path) = written(&unusual[0].1);
        assert_eq!(split_at_bursts(&path, 0, 4).map(|p| p.len()), Some(3));
    }

    #[test]
    fn a_file_of_cr_lines_reads_whole_as_its_lf_twin() {
        // No LF, so no header end to split after: the file is read whole, every CR an LF.
        let lf = file_text(40, 7);
        let (_dir, lf_path) = written(&lf);
        let (_dir2, cr_path) = written(&lf.replace('\n', "\r"));
        assert!(split_at_bursts(&cr_path, 0, 4).is_none());
        assert_eq!(whole(&cr_path), whole(&lf_path));
    }

    #[test]
    fn a_quote_before_a_cut_shows_once_its_part_is_read() {
        // The split itself cannot see it; the part's reader must.
        let text = file_text(40, 7).replacen(",ok\n", ",\"ok\"\n", 1);
        let (_dir, path) = written(&text);
        let mut parts = split_at_bursts(&path, 0, 2).expect("a split");
        let mut row = Exchange::default();
        while parts[0].read_into(&mut row).expect("rows") {}
        assert!(!parts[0].all_plain());
    }
}
