//! Splitting an exchanges file into lines and records: plain lines by a word-at-a-time byte
//! scan, every other line by the csv crate.
//!
//! Files taucal writes hold no quotes, so nearly every line is plain: fields between commas,
//! ended by LF or CR LF. The csv crate runs a state machine over every byte; here a plain line
//! is first offered whole to the caller's parser (which finds each field's end as it reads its
//! value), then, if that parser declines it, split by a scan that tests eight bytes per step and
//! stops only at bytes below `-` (commas, line ends, quotes, CR, spaces, a little punctuation).
//! Anything else — a quote, a bare CR, a blank line, a wrong number of fields, a last line
//! without its newline — is handed to the csv crate, positioned where the scan stopped, so such
//! records, their errors and every position are the csv crate's own.
//!
//! Two things the csv crate would take without bound are refused here, with the line: a line
//! longer than [`MAX_LINE_BYTES`] (a row is under 200 bytes; `/dev/zero` is one endless line)
//! and a record running over more than [`MAX_RECORD_BYTES`] (a quote never closed). A file
//! whose first line ends in a bare CR (classic Mac OS line endings) is read with every CR taken
//! as a line end, at the speed of any other.

use std::fmt;
use std::io::{self, Read, Seek, SeekFrom};
use std::ops::Range;

/// Bytes read from the file at a time: small enough to stay in cache between the kernel's copy
/// and the parse (`read` alone took about three times as long over a 221 MB file in 256 KiB
/// reads as in 64 KiB reads).
pub(crate) const BLOCK: usize = 64 * 1024;

/// The longest line read, not counting its LF: a row taucal writes is under 200 bytes, and a
/// bound keeps a file without line ends from filling memory.
pub const MAX_LINE_BYTES: usize = 4096;

/// The most bytes the csv crate may read for one record, blank lines before it included: a
/// quoted field may hold line ends, and one left open would otherwise take the rest of the file.
pub const MAX_RECORD_BYTES: usize = 64 * 1024;

/// A line or record beyond the bounds above, as the error the csv crate passes on from its
/// reader.
#[derive(Debug)]
pub(crate) struct TooLong {
    /// The 1-based line it was found on.
    pub(crate) line: u64,
    /// A record over several lines, rather than one line.
    record: bool,
}

impl fmt::Display for TooLong {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.record {
            write!(
                f,
                "a record runs on past {} KiB, over several lines (a quote never closed?)",
                MAX_RECORD_BYTES / 1024
            )
        } else {
            write!(
                f,
                "the line is longer than {MAX_LINE_BYTES} bytes (an exchanges row is under 200): \
                 not an exchanges file, or its line ends are missing"
            )
        }
    }
}

impl std::error::Error for TooLong {}

impl TooLong {
    /// The error as the csv crate reports a reader's error.
    fn csv_error(line: u64, record: bool) -> csv::Error {
        csv::Error::from(io::Error::other(TooLong { line, record }))
    }

    /// The `TooLong` inside a csv crate error, if that is what it is.
    pub(crate) fn inside(e: &csv::Error) -> Option<&TooLong> {
        match e.kind() {
            csv::ErrorKind::Io(io) => io.get_ref()?.downcast_ref(),
            _ => None,
        }
    }
}

/// Slack after the data, so an eight-byte load at any byte up to the last newline stays in the
/// buffer.
const PAD: usize = 8;

/// High bit of every byte of a word.
const HIGH_BITS: u64 = 0x8080_8080_8080_8080;

/// `-` in every byte: the first byte value the scan steps over.
const DASHES: u64 = 0x2D2D_2D2D_2D2D_2D2D;

/// The high bit of each byte of `word` below `-` (commas, line ends, quotes, CR, spaces, a
/// little punctuation), and no other bit. Per byte, with no carry between bytes: the high bit
/// of `(b | 0x80) - 0x2D` is set when the low seven bits are at least `-`; or-ing `b` back in
/// counts bytes ≥ 0x80 as text (UTF-8).
pub(crate) fn below_dash(word: u64) -> u64 {
    !(((word | HIGH_BITS) - DASHES) | word) & HIGH_BITS
}

/// The eight bytes of `bytes` from `at`, little-endian (byte `at` lowest). A line handed out by
/// the splitter has eight bytes or more after each of its bytes (its own, or padding).
pub(crate) fn word_at(bytes: &[u8], at: usize) -> u64 {
    let word: [u8; 8] = bytes[at..at + 8].try_into().expect("eight bytes");
    u64::from_le_bytes(word)
}

/// A record: where its fields lie in `bytes`, and the line the csv crate names for it.
pub(crate) struct Record<'a> {
    bytes: &'a [u8],
    /// Where each field starts, then one more entry: field `i` is
    /// `bytes[starts[i]..starts[i + 1] - 1]` (a separator follows every field).
    starts: &'a [usize],
    line: u64,
}

impl<'a> Record<'a> {
    /// Field `i`; empty past the last.
    pub(crate) fn field(&self, i: usize) -> &'a [u8] {
        self.range(i).map_or(&[], |range| &self.bytes[range])
    }

    /// A record the csv crate read, its fields copied into `joined` with a separator after each
    /// (`starts` takes where they start).
    pub(crate) fn from_csv(
        record: &csv::ByteRecord,
        joined: &'a mut Vec<u8>,
        starts: &'a mut Vec<usize>,
    ) -> Self {
        joined.clear();
        starts.clear();
        starts.push(0);
        for field in record {
            joined.extend_from_slice(field);
            joined.push(b',');
            starts.push(joined.len());
        }
        Record {
            bytes: joined,
            starts,
            line: record.position().map_or(0, csv::Position::line),
        }
    }

    /// Where field `i` lies in `bytes`.
    fn range(&self, i: usize) -> Option<Range<usize>> {
        Some(*self.starts.get(i)?..*self.starts.get(i + 1)? - 1)
    }

    /// The line the csv crate reports for this record: where reading it began, so blank lines
    /// before it count, and in a CR LF file its line's LF does not yet.
    pub(crate) fn line(&self) -> u64 {
        self.line
    }
}

/// Splits records from a reader after its header row.
pub(crate) struct Splitter<R> {
    csv: csv::Reader<Window<R>>,
    /// The csv crate's last record, and its fields again with a separator after each.
    record: csv::ByteRecord,
    joined: Vec<u8>,
    /// Field starts of the record handed out last (see [`Record`]), one more than the header
    /// has fields.
    starts: Vec<usize>,
    /// Fields per record: the header's count (the csv crate refuses any other).
    fields: usize,
    /// Where the next record starts, as the csv crate would count it: offset in the window,
    /// line, and records so far (the header is record 0).
    at: usize,
    line: u64,
    index: u64,
    /// Set after an I/O error: the csv crate reads nothing more after one either.
    failed: bool,
    /// Set once the csv crate has read a record or met an error: a quote, a blank line, a
    /// bare CR, a field count other than the header's, a last line without its end.
    unusual: bool,
}

/// What the scan made of the line at `at`.
enum Scan {
    /// A plain record; the next starts at `at` on `line`.
    Plain { at: usize, line: u64 },
    /// Not a plain record: the csv crate must read it.
    Unusual,
}

/// What the splitter hands out.
pub(crate) enum Split<'a> {
    /// A line the caller's parser read whole.
    Parsed,
    /// A record for the caller to read field by field.
    Record(Record<'a>),
}

impl<R: Read> Splitter<R> {
    /// Reads the header through the csv crate; `block` is how much to read at a time.
    pub(crate) fn new(reader: R, block: usize) -> csv::Result<Self> {
        let mut window = Window::new(reader, block);
        window.settle_endings()?;
        let mut csv = csv::ReaderBuilder::new()
            .has_headers(true)
            .from_reader(window);
        let fields = csv.byte_headers()?.len();
        let pos = csv.position().clone();
        Ok(Splitter {
            at: csv.get_ref().offset_of(pos.byte()),
            line: pos.line(),
            index: pos.record(),
            csv,
            record: csv::ByteRecord::new(),
            joined: Vec::new(),
            starts: vec![0; fields + 1],
            fields,
            failed: false,
            unusual: false,
        })
    }

    /// The header row.
    pub(crate) fn header(&mut self) -> csv::Result<&csv::ByteRecord> {
        self.csv.byte_headers()
    }

    /// The next line or record; `None` at the end of the file (and after an I/O error). A plain
    /// line is first offered to `parse_line`, with the buffer and where the line's first field
    /// starts (eight bytes or more follow each byte up to the line's end): it returns where the
    /// line's last field ends if it read the whole line, and the line is then done. Otherwise
    /// the line is split into a record. After an error other than I/O the record is skipped,
    /// as by the csv crate.
    pub(crate) fn next_split(
        &mut self,
        parse_line: impl FnOnce(&[u8], usize) -> Option<usize>,
    ) -> csv::Result<Option<Split<'_>>> {
        let Some((start, line)) = self.line_start()? else {
            return self.by_csv().map(|record| record.map(Split::Record));
        };
        let bytes = self.csv.get_ref().data_padded();
        // Where the line ends and its LF, then where the next starts and on which line.
        let parsed = parse_line(bytes, start).and_then(|end| match bytes[end] {
            b'\n' if end > start => Some((end, end + 1, line + 1)),
            b'\r' if end > start && bytes[end + 1] == b'\n' => Some((end + 1, end + 1, line)),
            _ => None,
        });
        if let Some((lf, at, next_line)) = parsed {
            self.refuse_long(start, lf, line)?;
            self.at = at;
            self.line = next_line;
            self.index += 1;
            return Ok(Some(Split::Parsed));
        }
        match self.scan(start, line) {
            Scan::Plain {
                at,
                line: next_line,
            } => {
                let lf = if next_line > line { at - 1 } else { at };
                self.refuse_long(start, lf, line)?;
                let record_line = self.line;
                self.at = at;
                self.line = next_line;
                self.index += 1;
                Ok(Some(Split::Record(Record {
                    bytes: self.csv.get_ref().data_padded(),
                    starts: &self.starts,
                    line: record_line,
                })))
            }
            Scan::Unusual => self.by_csv().map(|record| record.map(Split::Record)),
        }
    }

    /// An error if the line from `start` to its LF at `lf` (on `line`) is too long.
    fn refuse_long(&mut self, start: usize, lf: usize, line: u64) -> csv::Result<()> {
        if lf - start > MAX_LINE_BYTES {
            self.failed = true;
            return Err(TooLong::csv_error(line, false));
        }
        Ok(())
    }

    /// Where the line after `at` starts, reading more of the file until the window holds all
    /// of it; `None` if the file ends first (or reading failed), leaving the rest to the csv
    /// crate. The csv crate skips line ends before a record; this skips one LF (a CR LF line
    /// end leaves its LF to the next record).
    fn line_start(&mut self) -> csv::Result<Option<(usize, u64)>> {
        loop {
            if self.failed {
                return Ok(None);
            }
            let window = self.csv.get_ref();
            let (bytes, limit) = (window.data_padded(), window.limit());
            let (mut start, mut line) = (self.at, self.line);
            if start < limit && bytes[start] == b'\n' {
                start += 1;
                line += 1;
            }
            if start < limit {
                return Ok(Some((start, line)));
            }
            // No LF from `start` on: the line is at least this long.
            if window.len() - start > MAX_LINE_BYTES {
                self.failed = true;
                return Err(TooLong::csv_error(line, false));
            }
            if window.at_end() {
                return Ok(None);
            }
            let window = self.csv.get_mut();
            window.discard(self.at);
            self.at = 0;
            if let Err(e) = window.fill() {
                self.failed = true;
                return Err(e.into());
            }
        }
    }

    /// Splits the line from `start` into `starts` if it is plain.
    fn scan(&mut self, start: usize, line: u64) -> Scan {
        let bytes = self.csv.get_ref().data_padded();
        self.starts[0] = start;
        // Separators found so far: commas, then the line end.
        let mut seps = 0;
        let mut from = start;
        // Eight bytes per step, then each byte below `-` in the step. A newline ends the scan
        // before the padding.
        loop {
            let word = word_at(bytes, from);
            let mut below = below_dash(word);
            while below != 0 {
                let shift = below.trailing_zeros() - 7;
                below &= below - 1;
                let stop = from + (shift / 8) as usize;
                let (at, line) = match (word >> shift) as u8 {
                    b',' if seps + 1 < self.fields => {
                        seps += 1;
                        self.starts[seps] = stop + 1;
                        continue;
                    }
                    b'\n' if stop > start => (stop + 1, line + 1),
                    b'\r' if stop > start && bytes[stop + 1] == b'\n' => (stop + 1, line),
                    // A quote, a bare CR, a blank line (the csv crate skips it, counting its
                    // line), or a field too many.
                    b',' | b'\n' | b'\r' | b'"' => return Scan::Unusual,
                    // Spaces and other text below `-`.
                    _ => continue,
                };
                if seps + 1 != self.fields {
                    return Scan::Unusual;
                }
                self.starts[self.fields] = stop + 1;
                return Scan::Plain { at, line };
            }
            from += 8;
        }
    }

    /// Whether every line so far was plain (no line went to the csv crate).
    pub(crate) fn all_plain(&self) -> bool {
        !self.unusual
    }

    /// Has the csv crate read the record at `at`, then carries on after it.
    fn by_csv(&mut self) -> csv::Result<Option<Record<'_>>> {
        if self.failed {
            return Ok(None);
        }
        self.csv.get_mut().begin_record(self.line);
        let mut pos = csv::Position::new();
        pos.set_byte(self.csv.get_ref().position_of(self.at))
            .set_line(self.line)
            .set_record(self.index);
        let read = self
            .csv
            .seek_raw(SeekFrom::Start(pos.byte()), pos)
            .and_then(|()| self.csv.read_byte_record(&mut self.record));
        let next = self.csv.position();
        self.at = self.csv.get_ref().offset_of(next.byte());
        self.line = next.line();
        self.index = next.record();
        self.unusual |= !matches!(read, Ok(false));
        match read {
            Ok(true) => Ok(Some(Record::from_csv(
                &self.record,
                &mut self.joined,
                &mut self.starts,
            ))),
            Ok(false) => Ok(None),
            Err(e) => {
                self.failed = matches!(e.kind(), csv::ErrorKind::Io(_));
                Err(e)
            }
        }
    }
}

/// The bytes read from the file and not yet split, for the scan and for the csv crate, which
/// reads (and seeks) through it as an `io::Read`.
struct Window<R> {
    inner: R,
    /// `buf[..end]` holds file bytes from offset `base`, and `PAD` or more bytes follow.
    buf: Vec<u8>,
    end: usize,
    base: u64,
    /// One past the last LF in `buf[..end]`, or 0.
    limit: usize,
    /// Where the csv crate reads next.
    cursor: usize,
    /// Bytes to ask the file for at a time.
    block: usize,
    /// The file has ended.
    eof: bool,
    /// Every CR read is made an LF: the file's first line ends in a bare CR.
    cr_lines: bool,
    /// For the csv crate's reads: the line it reads on, the bytes of that line handed out so
    /// far, and all bytes handed out since the record began.
    line: u64,
    run: usize,
    handed: usize,
}

impl<R: Read> Window<R> {
    fn new(inner: R, block: usize) -> Self {
        Window {
            inner,
            buf: Vec::new(),
            end: 0,
            base: 0,
            limit: 0,
            cursor: 0,
            block: block.max(1),
            eof: false,
            cr_lines: false,
            line: 1,
            run: 0,
            handed: 0,
        }
    }

    /// Reads until the file's first line end shows whether lines end in a bare CR, and if so
    /// makes every CR an LF from here on: the scan then takes such lines as plain ones. A CR
    /// line end is a byte like an LF, so the file's offsets stay as they are.
    fn settle_endings(&mut self) -> io::Result<()> {
        let mut from = 0;
        loop {
            let data = &self.buf[..self.end];
            match data[from..].iter().position(|&b| b == b'\r' || b == b'\n') {
                Some(i) if data[from + i] == b'\n' => return Ok(()),
                Some(i) if from + i + 1 < self.end => {
                    if data[from + i + 1] != b'\n' {
                        self.cr_lines = true;
                        self.make_lines(0);
                    }
                    return Ok(());
                }
                // A CR last: the byte after it decides.
                Some(i) => from += i,
                None => from = self.end,
            }
            if self.eof || self.end > MAX_LINE_BYTES {
                return Ok(());
            }
            self.fill()?;
        }
    }

    /// With CR line ends, makes the CRs from `from` on LFs, and finds the last LF again.
    fn make_lines(&mut self, from: usize) {
        if !self.cr_lines {
            return;
        }
        for b in &mut self.buf[from..self.end] {
            if *b == b'\r' {
                *b = b'\n';
            }
        }
        if let Some(last) = self.buf[from..self.end].iter().rposition(|&b| b == b'\n') {
            self.limit = from + last + 1;
        }
    }

    /// The csv crate is to read a record from the line `line` on.
    fn begin_record(&mut self, line: u64) {
        self.line = line;
        self.run = 0;
        self.handed = 0;
    }

    /// Bytes in the window.
    fn len(&self) -> usize {
        self.end
    }

    /// The data and the padding after it.
    fn data_padded(&self) -> &[u8] {
        &self.buf
    }

    fn limit(&self) -> usize {
        self.limit
    }

    fn at_end(&self) -> bool {
        self.eof
    }

    /// The window offset of file position `position` (within the window).
    fn offset_of(&self, position: u64) -> usize {
        usize::try_from(position - self.base).expect("a window offset fits usize")
    }

    /// The file position of window offset `offset`.
    fn position_of(&self, offset: usize) -> u64 {
        self.base + offset as u64
    }

    /// Drops the bytes before `offset`, keeping the rest at the front.
    fn discard(&mut self, offset: usize) {
        self.buf.copy_within(offset..self.end, 0);
        self.base += offset as u64;
        self.end -= offset;
        self.limit = self.limit.saturating_sub(offset);
        self.cursor = self.cursor.saturating_sub(offset);
    }

    /// Appends one read of the file; at its end sets `eof` instead.
    fn fill(&mut self) -> io::Result<()> {
        let want = self.end + self.block + PAD;
        if self.buf.len() < want {
            self.buf.resize(want, 0);
        }
        let read = loop {
            match self
                .inner
                .read(&mut self.buf[self.end..self.end + self.block])
            {
                Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
                read => break read?,
            }
        };
        if read == 0 {
            self.eof = true;
        }
        let fresh = self.end..self.end + read;
        if let Some(last) = self.buf[fresh.clone()].iter().rposition(|&b| b == b'\n') {
            self.limit = fresh.start + last + 1;
        }
        self.end = fresh.end;
        self.make_lines(fresh.start);
        Ok(())
    }
}

/// The csv crate's view: bytes from the cursor to the end of its line (so each of its reads
/// copies about one line), reading more of the file when the window runs out; an error once a
/// line or the record grows past its bound.
impl<R: Read> Read for Window<R> {
    fn read(&mut self, out: &mut [u8]) -> io::Result<usize> {
        if self.cursor == self.end && !self.eof {
            self.fill()?;
        }
        let ahead = &self.buf[self.cursor..self.end];
        let lf = ahead.iter().position(|&b| b == b'\n');
        let line = lf.map_or(ahead.len(), |lf| lf + 1);
        let n = line.min(out.len());
        let ends_line = lf.is_some_and(|lf| lf < n);
        // The line's bytes before its LF: its length, or a bound below it.
        let run = self.run + n - usize::from(ends_line);
        self.handed += n;
        if run > MAX_LINE_BYTES || self.handed > MAX_RECORD_BYTES {
            let record = run <= MAX_LINE_BYTES;
            return Err(io::Error::other(TooLong {
                line: self.line,
                record,
            }));
        }
        out[..n].copy_from_slice(&ahead[..n]);
        self.cursor += n;
        if ends_line {
            self.line += 1;
            self.run = 0;
        } else {
            self.run = run;
        }
        Ok(n)
    }
}

/// Only to a position inside the window: where the csv crate is to read a record.
impl<R: Read> Seek for Window<R> {
    fn seek(&mut self, to: SeekFrom) -> io::Result<u64> {
        let inside = self.base..=self.position_of(self.end);
        match to {
            SeekFrom::Start(position) if inside.contains(&position) => {
                self.cursor = self.offset_of(position);
                Ok(position)
            }
            _ => Err(io::Error::other("seek outside the read window")),
        }
    }
}

/// A reader for tests that hands out at most `step` bytes per read, so reads end anywhere in a
/// line.
#[cfg(test)]
pub(crate) struct Trickle {
    bytes: io::Cursor<Vec<u8>>,
    step: usize,
}

#[cfg(test)]
impl Trickle {
    /// Reads a copy of `bytes`.
    pub(crate) fn new(bytes: &[u8], step: usize) -> Self {
        Trickle {
            bytes: io::Cursor::new(bytes.to_vec()),
            step,
        }
    }
}

#[cfg(test)]
impl Read for Trickle {
    fn read(&mut self, out: &mut [u8]) -> io::Result<usize> {
        let n = self.step.min(out.len());
        self.bytes.read(&mut out[..n])
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// A reading of a file: its header, then each record's fields and line (`None` where the
    /// caller's parser took the line whole, which names no line), or an error's text.
    type Reading = (
        Vec<Vec<u8>>,
        Vec<Result<(Vec<Vec<u8>>, Option<u64>), String>>,
    );

    /// The csv crate's own reading, with the settings the splitter uses.
    fn csv_crate_reading(bytes: &[u8]) -> Result<Reading, String> {
        let mut rdr = csv::ReaderBuilder::new()
            .has_headers(true)
            .from_reader(bytes);
        let header = rdr.byte_headers().map_err(|e| e.to_string())?;
        let header = header.iter().map(<[u8]>::to_vec).collect();
        let mut records = Vec::new();
        let mut record = csv::ByteRecord::new();
        loop {
            match rdr.read_byte_record(&mut record) {
                Ok(true) => records.push(Ok((
                    record.iter().map(<[u8]>::to_vec).collect(),
                    record.position().map(csv::Position::line),
                ))),
                Ok(false) => return Ok((header, records)),
                Err(e) => records.push(Err(e.to_string())),
            }
        }
    }

    /// The splitter's reading in `block`-byte reads of at most `step` bytes each. With `whole`,
    /// a parser takes every line without a quote or CR whose commas make the header's count.
    fn splitter_reading(
        bytes: &[u8],
        block: usize,
        step: usize,
        whole: bool,
    ) -> Result<Reading, String> {
        let mut split =
            Splitter::new(Trickle::new(bytes, step), block).map_err(|e| e.to_string())?;
        let header = split.header().map_err(|e| e.to_string())?;
        let header: Vec<Vec<u8>> = header.iter().map(<[u8]>::to_vec).collect();
        let fields = header.len();
        let mut records = Vec::new();
        loop {
            let mut taken = Vec::new();
            let parse_line = |bytes: &[u8], from: usize| {
                let end = from + bytes[from..].iter().position(|b| b"\"\r\n".contains(b))?;
                let line: Vec<Vec<u8>> = bytes[from..end]
                    .split(|&b| b == b',')
                    .map(<[u8]>::to_vec)
                    .collect();
                (whole && bytes[end] != b'"' && line.len() == fields).then(|| {
                    taken = line;
                    end
                })
            };
            match split.next_split(parse_line) {
                Ok(Some(Split::Parsed)) => records.push(Ok((taken, None))),
                Ok(Some(Split::Record(record))) => {
                    let fields = (0..record.starts.len() - 1).map(|i| record.field(i).to_vec());
                    records.push(Ok((fields.collect(), Some(record.line()))));
                }
                Ok(None) => return Ok((header, records)),
                Err(e) => records.push(Err(e.to_string())),
            }
        }
    }

    /// Whether two readings agree: the same header, records and errors, and the same line
    /// wherever both name one.
    fn agree(a: &Result<Reading, String>, b: &Result<Reading, String>) -> bool {
        match (a, b) {
            (Ok((header_a, a)), Ok((header_b, b))) => {
                header_a == header_b
                    && a.len() == b.len()
                    && a.iter().zip(b).all(|(a, b)| match (a, b) {
                        (Ok((fields_a, line_a)), Ok((fields_b, line_b))) => {
                            fields_a == fields_b
                                && (line_a.is_none() || line_b.is_none() || line_a == line_b)
                        }
                        (Err(a), Err(b)) => a == b,
                        _ => false,
                    })
            }
            (Err(a), Err(b)) => a == b,
            _ => false,
        }
    }

    proptest! {
        #[test]
        fn splits_every_file_as_the_csv_crate_does(
            header in "[a-c]{1,2}(,[a-c]{1,2}){0,3}\\r?\\n",
            body in proptest::collection::vec(
                prop::sample::select(b"a1 ,,\"\r\n\n".to_vec()),
                0..160,
            ),
            block in 1usize..48,
            step in 1usize..12,
            whole in any::<bool>(),
        ) {
            // The csv crate's reader is the reference: fields, line numbers (blank lines, CR LF
            // and quoted newlines included) and the text of every error (byte offsets and record
            // numbers included), with reads ending anywhere.
            let mut text = header.into_bytes();
            text.extend(body);
            let want = csv_crate_reading(&text);
            let got = splitter_reading(&text, block, step, whole);
            prop_assert!(agree(&got, &want), "{:?}\n{:?}\nvs\n{:?}", String::from_utf8_lossy(&text), got, want);
        }
    }

    /// Records as fields and the line each is named by.
    type Lines = Vec<(Vec<Vec<u8>>, u64)>;

    /// Every record's fields and line from `text` by the splitter (`whole`: a parser takes
    /// every plain line), reading `block` bytes at a time, or the line a `TooLong` names.
    fn split_all(text: &[u8], block: usize, whole: bool) -> Result<Lines, u64> {
        let too_long = |e: csv::Error| TooLong::inside(&e).expect("too long").line;
        let mut split =
            Splitter::new(Trickle::new(text, 1 + block % 13), block).map_err(too_long)?;
        split.header().map_err(too_long)?;
        let mut records = Vec::new();
        loop {
            let mut taken = Vec::new();
            let parse_line = |bytes: &[u8], from: usize| {
                let end = from + bytes[from..].iter().position(|b| b"\"\r\n".contains(b))?;
                (whole && bytes[end] != b'"').then(|| {
                    taken = bytes[from..end]
                        .split(|&b| b == b',')
                        .map(<[u8]>::to_vec)
                        .collect();
                    end
                })
            };
            let line = split.line;
            match split.next_split(parse_line).map_err(too_long)? {
                Some(Split::Parsed) => records.push((taken, line)),
                Some(Split::Record(record)) => {
                    let fields = (0..record.starts.len() - 1).map(|i| record.field(i).to_vec());
                    records.push((fields.collect(), record.line()));
                }
                None => return Ok(records),
            }
        }
    }

    #[test]
    fn a_line_past_the_bound_is_refused_with_its_line_wherever_blocks_end() {
        // Known answer: line 5 holds MAX_LINE_BYTES + 1 bytes before its LF; lines of exactly
        // MAX_LINE_BYTES are read. Plain, quoted (the csv crate's path) and last (no LF).
        let fits = "y".repeat(MAX_LINE_BYTES - 2);
        let long = "x".repeat(MAX_LINE_BYTES - 1);
        let quoted_long = "x".repeat(MAX_LINE_BYTES - 3);
        let head = format!("a,b\n1,2\n{fits},3\n\"{}\",4\n", &fits[2..]);
        for (text, want) in [
            (format!("{head}{long},5\n6,7\n"), Err(5)),
            (format!("{head}\"{quoted_long}\",5\n6,7\n"), Err(5)),
            (format!("{head}6,7\r\n{long},5\r\n6,7\r\n"), Err(6)),
            (format!("{head}{long},5"), Err(5)),
            (format!("{head}{fits},5"), Ok(4)),
        ] {
            for block in [1, 7, 64, 1000, MAX_LINE_BYTES, 5000, BLOCK] {
                for whole in [false, true] {
                    let got = split_all(text.as_bytes(), block, whole).map(|r| r.len());
                    assert_eq!(got, want, "block {block}, whole {whole}: {}", &text[..40]);
                }
            }
        }
    }

    #[test]
    fn endless_input_is_refused_at_the_bound() {
        // `/dev/zero` and a file without line ends: the header is one endless line; a quote
        // left open runs a record on over every line after it.
        for byte in [0, b'x'] {
            let endless = io::repeat(byte).take(1 << 40);
            let e = Splitter::new(endless, BLOCK).err().expect("too long");
            let too_long = TooLong::inside(&e).expect("too long");
            assert_eq!((too_long.line, too_long.record), (1, false));
        }
        let mut text = b"a,b\n1,\"2\n".to_vec();
        text.extend(b"more\n".repeat(MAX_RECORD_BYTES / 5 + 1));
        // Five bytes on line 2, five on each after: the record passes the bound on this line.
        let line = 2 + (MAX_RECORD_BYTES - 5) / 5 + 1;
        assert_eq!(
            split_all(&text, BLOCK, true).map(|r| r.len()),
            Err(line as u64)
        );
    }

    #[test]
    fn lines_ending_in_a_bare_cr_read_as_lines() {
        // The csv crate's reading of the same file with LF line ends is the reference: fields
        // and line numbers alike, every plain line taken by the parser.
        let mut lf = String::from("a,b,c\n");
        for i in 0..300 {
            lf.push_str(&format!("{i},\"q{i}\",{}\n", i * 7));
            lf.push_str(&format!("{i},p,{}\n", i * 3));
        }
        let cr = lf.replace('\n', "\r");
        let (_, want) = csv_crate_reading(lf.as_bytes()).expect("read");
        let want: Lines = want
            .into_iter()
            .map(|r| r.map(|(fields, line)| (fields, line.expect("a line"))))
            .collect::<Result<_, _>>()
            .expect("records");
        assert_eq!(want.len(), 600);
        for block in [1, 5, 64, BLOCK] {
            for whole in [false, true] {
                let got = split_all(cr.as_bytes(), block, whole).expect("read");
                assert_eq!(got, want, "block {block}, whole {whole}");
            }
        }
    }

    #[test]
    fn a_large_file_with_bare_cr_lines_is_read_line_by_line_in_a_bounded_window() {
        // Linear by construction: every line goes through the plain path (each byte scanned a
        // bounded number of times) and the window never holds more than a block and a line,
        // so no step can rescan the rest of the file. Reading the CR file used to keep all of
        // it in the window and rescan it for every record.
        let line = "sweep,3,1,0,24.0,5180,20,85825865059008,235959969002250,0,1,0,-17.5,0,,ok\r";
        let text = format!("a,b,c,d,e,f,g,h,i,j,k,l,m,n,o,p\r{}", line.repeat(40_000));
        let mut split = Splitter::new(io::Cursor::new(text.into_bytes()), BLOCK).expect("open");
        split.header().expect("header");
        let mut lines = 0;
        while let Some(got) = split
            .next_split(|bytes, from| {
                bytes[from..]
                    .iter()
                    .position(|&b| b == b'\n')
                    .map(|n| from + n)
            })
            .expect("a line")
        {
            assert!(matches!(got, Split::Parsed));
            lines += 1;
        }
        assert_eq!(lines, 40_000);
        assert!(split.all_plain());
        let window = split.csv.get_ref().data_padded().len();
        assert!(
            window <= 2 * BLOCK + MAX_LINE_BYTES,
            "window {window} bytes"
        );
    }

    #[test]
    fn a_long_quoted_field_and_a_long_line_grow_the_window() {
        // The csv crate's reader is the reference; a record longer than a block must be read
        // whole whichever way it is split.
        let long = "x".repeat(300);
        let text = format!("a,b\n\"{long}\n{long}\",1\n{long},2\r\nz,3");
        let want = csv_crate_reading(text.as_bytes());
        for block in [1, 7, 64] {
            for whole in [false, true] {
                let got = splitter_reading(text.as_bytes(), block, 5, whole);
                assert!(agree(&got, &want), "block {block}: {got:?}");
            }
        }
        let Ok((_, records)) = want else {
            panic!("the csv crate reads it")
        };
        assert_eq!(records.len(), 3);
    }
}
