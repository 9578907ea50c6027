//! An exchanges file in two parts, split where one burst ends and the next begins, so that the
//! parts can be read and fitted on two threads at once.
//!
//! The split is found by looking at the lines after the file's middle as bytes. That is right
//! only if no quote before them opened a field that runs across line ends; whether the first
//! part holds a quote is known once it is read ([`ExchangeRows::all_plain`]), and the caller
//! then reads the file whole instead. Nothing here reports an error: any trouble means "read
//! the file whole", and that reader reports it, with its line and column.

use super::csv_io::{read_from, ExchangeRows};
use std::fs::File;
use std::io::{self, Read, Seek, SeekFrom};
use std::path::Path;

/// How much of the file after its middle is searched for a burst boundary. A burst is a few
/// dozen lines; a file with none ending within 1 MiB is not split.
const LOOK_BYTES: u64 = 1 << 20;

/// The longest header searched for its line end.
const HEADER_BYTES: u64 = 64 * 1024;

/// The two parts of a file.
pub struct FileHalves {
    /// From the header to the last line of a burst, near the middle.
    pub first: ExchangeRows<io::Take<File>>,
    /// The header again, then the rest of the file from the next burst's first line.
    pub second: ExchangeRows<io::Chain<io::Cursor<Vec<u8>>, File>>,
}

/// Splits the file at `path` at the first burst boundary after its middle; `None` if it is
/// shorter than `min_bytes`, or if the lines there are not plain enough to tell (a quote, a
/// blank line, a bare CR, a field count other than the header's, a burst or point not written
/// as plain decimal digits), or none is found.
pub fn split_at_burst(path: &Path, min_bytes: u64) -> Option<FileHalves> {
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
    let middle = len / 2;
    file.seek(SeekFrom::Start(middle)).ok()?;
    let mut window = Vec::new();
    file.by_ref()
        .take(LOOK_BYTES)
        .read_to_end(&mut window)
        .ok()?;
    let split = middle + columns.first_new_burst(&window)? as u64;
    if split <= header_len as u64 {
        return None;
    }
    let name = path.display().to_string();
    file.seek(SeekFrom::Start(0)).ok()?;
    let first = read_from(file.take(split), name.clone()).ok()?;
    let mut rest = File::open(path).ok()?;
    rest.seek(SeekFrom::Start(split)).ok()?;
    let second = read_from(io::Cursor::new(head).chain(rest), name).ok()?;
    Some(FileHalves { first, second })
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

    /// Where in `window` (which may start and end mid-line) the first line whose burst differs
    /// from the line before starts; only whole lines after the first line end count.
    fn first_new_burst(&self, window: &[u8]) -> Option<usize> {
        if window.contains(&b'"') {
            return None;
        }
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

    /// A line's stage, point and burst as written; `None` unless the line is plain (no bare
    /// CR, the header's field count) and point and burst are plain decimal digits, so that two
    /// keys are the same burst exactly when their bytes are equal.
    fn key_of<'a>(&self, line: &'a [u8]) -> Option<[&'a [u8]; 3]> {
        let body = line_body(line);
        if body.contains(&b'\r') {
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

    #[test]
    fn the_halves_hold_the_files_rows_split_where_a_burst_begins() {
        // Reference: the file read whole by the ordinary reader.
        let (_dir, path) = written(&file_text(40, 7));
        let whole: Vec<Exchange> = read_exchanges(&path)
            .expect("open")
            .map(Result::unwrap)
            .collect();
        let halves = split_at_burst(&path, 0).expect("a split");
        let (first, second) = (rows(halves.first), rows(halves.second));
        assert!(!first.is_empty() && !second.is_empty());
        let (last, next) = (&first[first.len() - 1], &second[0]);
        assert_ne!((last.point, last.burst), (next.point, next.burst));
        assert_eq!(next.seq, 0);
        assert_eq!([first, second].concat(), whole);
    }

    #[test]
    fn a_file_that_cannot_be_told_is_not_split() {
        let plain = file_text(40, 7);
        let (_dir, path) = written(&plain);
        assert!(
            split_at_burst(&path, plain.len() as u64 + 1).is_none(),
            "too short"
        );
        let middle = plain.len() / 2;
        let unusual = [
            (
                "a quote",
                plain[..middle + 50].to_string() + "\"" + &plain[middle + 50..],
            ),
            ("a point spelt 05", plain.replace("sweep,5,", "sweep,05,")),
            ("a blank line", plain.replace("ok\n", "ok\n\n")),
            ("a bare CR", plain.replace(",24.0,", ",24\r0,")),
            ("one burst", file_text(1, 400)),
        ];
        for (what, text) in unusual {
            let (_dir, path) = written(&text);
            assert!(split_at_burst(&path, 0).is_none(), "{what}");
        }
    }

    #[test]
    fn crlf_lines_split_too() {
        // Reference: the file read whole by the ordinary reader.
        let (_dir, path) = written(&file_text(40, 7).replace('\n', "\r\n"));
        let whole: Vec<Exchange> = read_exchanges(&path)
            .expect("open")
            .map(Result::unwrap)
            .collect();
        let halves = split_at_burst(&path, 0).expect("a split");
        assert_eq!([rows(halves.first), rows(halves.second)].concat(), whole);
    }

    #[test]
    fn a_quote_before_the_middle_shows_once_the_first_half_is_read() {
        // The split itself cannot see it; the first half's reader must.
        let mut text = file_text(40, 7);
        text = text.replacen(",ok\n", ",\"ok\"\n", 1);
        let (_dir, path) = written(&text);
        let mut halves = split_at_burst(&path, 0).expect("a split");
        let mut row = Exchange::default();
        while halves.first.read_into(&mut row).expect("rows") {}
        assert!(!halves.first.all_plain());
    }
}
