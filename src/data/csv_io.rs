//! `exchanges.csv`: writing it a burst at a time, and reading it back as a stream.
//!
//! The reader is on the path of every fit (`taucal fit`, and `taucal run` after recording), and
//! files run to millions of rows, so it reads by column position into a reused row instead of
//! deserializing a fresh row per line.

use super::plain_line::LineParser;
use super::record_split::{Record, Split, Splitter, BLOCK};
use super::row_batches::{set_label, Batches, Labels, RowSource};
use super::Exchange;
use std::fs::File;
use std::io::{self, BufWriter, Read};
use std::path::Path;
use thiserror::Error;

/// The contract header of `exchanges.csv`.
pub const EXCHANGES_HEADER: [&str; 16] = [
    "stage",
    "point",
    "burst",
    "seq",
    "atten_db",
    "center_mhz",
    "bw_mhz",
    "t1_ps",
    "t2_ps",
    "t3_ps",
    "t4_ps",
    "dut_gain",
    "dut_rssi_dbm",
    "ref_gain",
    "temp_c",
    "status",
];

/// Where recorded exchanges go: a CSV file in a run, a vector in tests.
pub trait RecordSink {
    /// Takes one burst's rows; they must be flushed when this returns.
    fn write_burst(&mut self, rows: &[Exchange]) -> io::Result<()>;

    /// Makes what was written durable (at point boundaries, before the journal says so).
    fn sync(&mut self) -> io::Result<()> {
        Ok(())
    }
}

impl RecordSink for Vec<Exchange> {
    fn write_burst(&mut self, rows: &[Exchange]) -> io::Result<()> {
        self.extend_from_slice(rows);
        Ok(())
    }
}

/// Writes `exchanges.csv`, flushing after every burst so a crash loses at most the burst under way.
pub struct ExchangeWriter {
    inner: csv::Writer<BufWriter<File>>,
}

impl ExchangeWriter {
    /// Opens an existing exchanges file to add rows after its last one (a resumed run).
    pub fn append(path: &Path) -> io::Result<Self> {
        let file = std::fs::OpenOptions::new().append(true).open(path)?;
        let inner = csv::WriterBuilder::new()
            .has_headers(false)
            .from_writer(BufWriter::new(file));
        Ok(ExchangeWriter { inner })
    }

    /// Creates the file and writes the header.
    pub fn create(path: &Path) -> io::Result<Self> {
        let file = File::create(path)?;
        let mut inner = csv::WriterBuilder::new()
            .has_headers(false)
            .from_writer(BufWriter::new(file));
        inner
            .write_record(EXCHANGES_HEADER)
            .map_err(io::Error::other)?;
        inner.flush()?;
        Ok(ExchangeWriter { inner })
    }
}

impl RecordSink for ExchangeWriter {
    fn write_burst(&mut self, rows: &[Exchange]) -> io::Result<()> {
        for r in rows {
            self.inner.serialize(r).map_err(io::Error::other)?;
        }
        self.inner.flush()
    }

    fn sync(&mut self) -> io::Result<()> {
        self.inner.flush()?;
        self.inner.get_ref().get_ref().sync_data()
    }
}

/// A bad row or header in an exchanges file.
#[derive(Debug, Error)]
pub enum ReadError {
    /// The file could not be opened or read.
    #[error("cannot read {path}: {source}")]
    Io {
        /// File path.
        path: String,
        /// Cause.
        source: io::Error,
    },
    /// A column the contract requires is missing.
    #[error("{path}: the header has no `{column}` column")]
    MissingColumn {
        /// File path.
        path: String,
        /// Missing column.
        column: String,
    },
    /// A row could not be parsed.
    #[error("{path}:{line}: {message}")]
    Row {
        /// File path.
        path: String,
        /// 1-based line.
        line: u64,
        /// What is wrong.
        message: String,
    },
}

/// Streams the rows of an exchanges file, checking the header first.
///
/// The file is read, split and parsed on a thread of its own while the caller fits: on two
/// cores the fit then costs about what reading the file alone costs.
pub fn read_exchanges(path: &Path) -> Result<ExchangeRows<File>, ReadError> {
    let name = path.display().to_string();
    let file = File::open(path).map_err(|source| ReadError::Io {
        path: name.clone(),
        source,
    })?;
    let rows = RowReader::new(file, name.clone(), BLOCK)?;
    let batches = Batches::spawn(rows, "exchanges-read")
        .map_err(|source| ReadError::Io { path: name, source })?;
    Ok(ExchangeRows {
        source: Source::Thread(batches),
    })
}

/// Streams rows from any reader (`name` labels errors), reading on the calling thread.
pub fn read_from<R: Read>(reader: R, name: String) -> Result<ExchangeRows<R>, ReadError> {
    Ok(ExchangeRows {
        source: Source::Here(RowReader::new(reader, name, BLOCK)?),
    })
}

/// Splits records and parses their contract columns, on the thread that calls it.
///
/// Fields are found by the header's column positions (looked up once) and parsed straight from
/// bytes, so a row costs no allocation: at millions of rows per fit, per-row `String`s and
/// serde's name matching were most of the time. Values parse as serde's csv reader parses them
/// (decimal or `0x` integers, Rust float syntax, empty cell = none), so both readings of a file
/// agree to the bit.
struct RowReader<R> {
    split: Splitter<R>,
    /// Reads plain lines whole, as they are split.
    plain: LineParser,
    /// Position in the record of each contract column, in `EXCHANGES_HEADER` order.
    columns: [usize; EXCHANGES_HEADER.len()],
    name: String,
}

impl<R: Read> RowReader<R> {
    /// Reads the header and finds the contract columns in it; `block` is the read size.
    fn new(reader: R, name: String, block: usize) -> Result<Self, ReadError> {
        let header_error = |e: csv::Error| ReadError::Row {
            path: name.clone(),
            line: 1,
            message: e.to_string(),
        };
        let mut split = Splitter::new(reader, block).map_err(header_error)?;
        let headers = split.header().map_err(header_error)?;
        let mut columns = [0usize; EXCHANGES_HEADER.len()];
        for (slot, wanted) in columns.iter_mut().zip(EXCHANGES_HEADER) {
            *slot = headers
                .iter()
                .position(|h| h == wanted.as_bytes())
                .ok_or_else(|| ReadError::MissingColumn {
                    path: name.clone(),
                    column: wanted.to_string(),
                })?;
        }
        let plain = LineParser::new(&columns, headers.len());
        Ok(RowReader {
            split,
            plain,
            columns,
            name,
        })
    }

    /// Reads the next row into `row`, reusing its strings; `Ok(false)` at the end of the file.
    fn read_into(&mut self, row: &mut Exchange) -> Result<bool, ReadError> {
        let labels = self.read_next(row)?;
        if let Some(Labels::Kept(_)) = labels {
            let (stage, status) = self.labels();
            set_label(&mut row.stage, stage);
            set_label(&mut row.status, status);
        }
        Ok(labels.is_some())
    }
}

impl<R: Read> RowSource<ReadError> for RowReader<R> {
    fn read_next(&mut self, row: &mut Exchange) -> Result<Option<Labels>, ReadError> {
        let plain = &mut self.plain;
        let record = match self
            .split
            .next_split(|bytes, from| plain.parse(bytes, from, row))
        {
            Ok(Some(Split::Parsed)) => return Ok(Some(Labels::Kept(self.plain.labels_version()))),
            Ok(Some(Split::Record(record))) => record,
            Ok(None) => return Ok(None),
            Err(e) => {
                return Err(ReadError::Row {
                    path: self.name.clone(),
                    line: e.position().map_or(0, |p| p.line()),
                    message: e.to_string(),
                })
            }
        };
        fill(&record, &self.columns, row)
            .map(|()| Some(Labels::InRow))
            .map_err(|FieldError(i, message)| ReadError::Row {
                path: self.name.clone(),
                line: record.line(),
                message: format!("column {}: {message}", self.columns[i] + 1),
            })
    }

    fn labels(&self) -> (&str, &str) {
        self.plain.labels()
    }
}

/// Where rows come from.
enum Source<R> {
    /// Read on the calling thread.
    Here(RowReader<R>),
    /// Read on the reading thread.
    Thread(Batches<ReadError>),
}

/// The rows of an exchanges file, read one at a time into a reused row.
pub struct ExchangeRows<R> {
    source: Source<R>,
}

/// Why one field did not parse: the contract column index and what was wrong.
struct FieldError(usize, String);

impl<R: Read> ExchangeRows<R> {
    /// Reads the next row into `row`, reusing its strings (no allocation per row); `Ok(false)`
    /// at the end of the file.
    pub fn read_into(&mut self, row: &mut Exchange) -> Result<bool, ReadError> {
        match &mut self.source {
            Source::Here(reader) => reader.read_into(row),
            Source::Thread(batches) => batches.read_into(row),
        }
    }
}

/// Parses the contract columns of `record` into `row`.
fn fill(
    record: &Record<'_>,
    columns: &[usize; EXCHANGES_HEADER.len()],
    row: &mut Exchange,
) -> Result<(), FieldError> {
    let f = |i: usize| Field {
        index: i,
        bytes: record.field(columns[i]),
    };
    f(0).text_into(&mut row.stage)?;
    row.point = f(1).uint::<u32>()?;
    row.burst = f(2).uint::<u32>()?;
    row.seq = f(3).uint::<u32>()?;
    row.atten_db = f(4).float()?;
    row.center_mhz = f(5).uint::<u32>()?;
    row.bw_mhz = f(6).uint::<u32>()?;
    row.t1_ps = f(7).optional(Field::uint::<u64>)?;
    row.t2_ps = f(8).optional(Field::uint::<u64>)?;
    row.t3_ps = f(9).optional(Field::uint::<u64>)?;
    row.t4_ps = f(10).optional(Field::uint::<u64>)?;
    row.dut_gain = f(11).optional(Field::uint::<u32>)?;
    row.dut_rssi_dbm = f(12).optional(Field::float)?;
    row.ref_gain = f(13).optional(Field::uint::<u32>)?;
    row.temp_c = f(14).optional(Field::float)?;
    f(15).text_into(&mut row.status)
}

impl<R: Read> Iterator for ExchangeRows<R> {
    type Item = Result<Exchange, ReadError>;

    fn next(&mut self) -> Option<Self::Item> {
        let mut row = Exchange::default();
        match self.read_into(&mut row) {
            Ok(true) => Some(Ok(row)),
            Ok(false) => None,
            Err(e) => Some(Err(e)),
        }
    }
}

/// One cell of a row, with the contract column it stands for.
struct Field<'a> {
    index: usize,
    bytes: &'a [u8],
}

impl Field<'_> {
    fn fail(&self, message: impl std::fmt::Display) -> FieldError {
        FieldError(self.index, message.to_string())
    }

    fn text(&self) -> Result<&str, FieldError> {
        std::str::from_utf8(self.bytes).map_err(|e| self.fail(format!("invalid UTF-8: {e}")))
    }

    /// Text into `out`; a value equal to what `out` holds (a burst's stage, `ok`) is left alone.
    fn text_into(&self, out: &mut String) -> Result<(), FieldError> {
        if out.as_bytes() == self.bytes {
            return Ok(());
        }
        let text = self.text()?;
        out.clear();
        out.push_str(text);
        Ok(())
    }

    /// An unsigned integer. Plain decimal digits (every row taucal writes) are read directly;
    /// anything else goes through the standard parser, `0x` as hexadecimal, as serde's csv
    /// reader does, so odd but valid values and every error read the same either way.
    fn uint<T: TryFrom<u64> + std::str::FromStr + Num>(&self) -> Result<T, FieldError>
    where
        <T as std::str::FromStr>::Err: std::fmt::Display,
    {
        if let Some(v) = decimal(self.bytes).and_then(|v| T::try_from(v).ok()) {
            return Ok(v);
        }
        let text = self.text()?;
        match text.strip_prefix("0x") {
            Some(digits) => T::from_hex(digits).map_err(|e| self.fail(e)),
            None => text.parse::<T>().map_err(|e| self.fail(e)),
        }
    }

    fn float(&self) -> Result<f64, FieldError> {
        if let Some(v) = short_decimal(self.bytes) {
            return Ok(v);
        }
        self.text()?.parse::<f64>().map_err(|e| self.fail(e))
    }

    /// Empty cell = not reported.
    fn optional<T>(
        &self,
        parse: impl FnOnce(&Self) -> Result<T, FieldError>,
    ) -> Result<Option<T>, FieldError> {
        if self.bytes.is_empty() {
            Ok(None)
        } else {
            parse(self).map(Some)
        }
    }
}

/// Plain decimal digits, 1 to 19 of them (so the value fits a u64), eight at a time: the four
/// 15-digit timestamps of a row were the costliest fields to parse one digit at a time. `None`
/// for anything else, which the caller hands to the standard parser.
fn decimal(bytes: &[u8]) -> Option<u64> {
    if bytes.is_empty() || bytes.len() > 19 {
        return None;
    }
    let mut chunks = bytes.chunks_exact(8);
    let mut value = 0u64;
    for chunk in &mut chunks {
        value = value * 100_000_000 + eight_digits(chunk.try_into().ok()?)?;
    }
    for &b in chunks.remainder() {
        let digit = b.wrapping_sub(b'0');
        if digit > 9 {
            return None;
        }
        value = value * 10 + u64::from(digit);
    }
    Some(value)
}

/// The value of eight ASCII digits (first digit most significant), or `None` if one is not a
/// digit.
fn eight_digits(chunk: [u8; 8]) -> Option<u64> {
    const HIGH: u64 = 0xF0F0_F0F0_F0F0_F0F0;
    let v = u64::from_le_bytes(chunk);
    // A digit's high nibble is 3, and adding 6 to it does not carry into that nibble.
    if v & HIGH != ZEROS || v.wrapping_add(0x0606_0606_0606_0606) & HIGH != ZEROS {
        return None;
    }
    Some(digits_value(v))
}

/// `0` in every byte of a word.
pub(crate) const ZEROS: u64 = 0x3030_3030_3030_3030;

/// The value of a word of eight ASCII digits, loaded little-endian (byte `i` holds digit `i`,
/// the first most significant): three multiply-and-shift steps combine neighbours into pairs,
/// fours and the eight (each lane stays below its width, so no carries).
pub(crate) fn digits_value(word: u64) -> u64 {
    let v = word - ZEROS;
    let v = (v * 10 + (v >> 8)) & 0x00FF_00FF_00FF_00FF;
    let v = (v * 100 + (v >> 16)) & 0x0000_FFFF_0000_FFFF;
    (v * 10_000 + (v >> 32)) & 0xFFFF_FFFF
}

/// Exact powers of ten up to 10^15 (every one is an f64 without rounding).
const POWERS_OF_TEN: [f64; 16] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
];

/// A float written `[-]digits[.digits]` with at most 15 digits in all (attenuations, levels and
/// temperatures as taucal writes them), or `None` for any other spelling. The digits form an
/// integer below 2^53 and the divisor is an exact power of ten, so the one division is
/// correctly rounded: the same bits `str::parse` gives (Clinger's fast path), without its
/// general machinery.
fn short_decimal(bytes: &[u8]) -> Option<f64> {
    short_decimal_prefix(bytes).and_then(|(value, len)| (len == bytes.len()).then_some(value))
}

/// The longest start of `bytes` spelt `[-]digits[.digits]`, as [`short_decimal`] reads it,
/// and its length; `None` if there is none or it has more than 15 digits.
pub(crate) fn short_decimal_prefix(bytes: &[u8]) -> Option<(f64, usize)> {
    let negative = bytes.first() == Some(&b'-');
    let start = usize::from(negative);
    let mut at = start;
    let mut dot = None;
    // Wrapping: past 15 digits the value is refused anyway.
    let mut mantissa = 0u64;
    while let Some(&b) = bytes.get(at) {
        match b {
            b'0'..=b'9' => mantissa = mantissa.wrapping_mul(10).wrapping_add(u64::from(b - b'0')),
            b'.' if dot.is_none() => dot = Some(at),
            _ => break,
        }
        at += 1;
    }
    let (whole, fraction) = match dot {
        Some(dot) => (dot - start, at - dot - 1),
        None => (at - start, 0),
    };
    if whole == 0 || (dot.is_some() && fraction == 0) || whole + fraction > 15 {
        return None;
    }
    let value = mantissa as f64 / POWERS_OF_TEN[fraction];
    Some((if negative { -value } else { value }, at))
}

/// Hexadecimal parsing for the integer widths the contract uses.
trait Num: Sized {
    fn from_hex(digits: &str) -> Result<Self, std::num::ParseIntError>;
}

impl Num for u32 {
    fn from_hex(digits: &str) -> Result<Self, std::num::ParseIntError> {
        u32::from_str_radix(digits, 16)
    }
}

impl Num for u64 {
    fn from_hex(digits: &str) -> Result<Self, std::num::ParseIntError> {
        u64::from_str_radix(digits, 16)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(seq: u32) -> Exchange {
        Exchange {
            stage: "sweep".into(),
            point: 1,
            burst: 0,
            seq,
            atten_db: 17.25,
            center_mhz: 5180,
            bw_mhz: 80,
            t1_ps: Some(281_474_976_710_655),
            t2_ps: Some(12),
            t3_ps: Some(60_000_012),
            t4_ps: None,
            dut_gain: Some(2),
            dut_rssi_dbm: Some(-61.5),
            ref_gain: Some(0),
            temp_c: None,
            status: "lost".into(),
        }
    }

    #[test]
    fn writes_the_contract_header_and_reads_rows_back_exactly() {
        let dir = tempfile::tempdir().expect("tempdir");
        let path = dir.path().join("exchanges.csv");
        let mut w = ExchangeWriter::create(&path).expect("create");
        w.write_burst(&[row(0), row(1)]).expect("write");
        let text = std::fs::read_to_string(&path).expect("read");
        assert_eq!(
            text.lines().next(),
            Some("stage,point,burst,seq,atten_db,center_mhz,bw_mhz,t1_ps,t2_ps,t3_ps,t4_ps,dut_gain,dut_rssi_dbm,ref_gain,temp_c,status")
        );
        assert_eq!(
            text.lines().nth(1),
            Some("sweep,1,0,0,17.25,5180,80,281474976710655,12,60000012,,2,-61.5,0,,lost")
        );
        let back: Vec<Exchange> = read_exchanges(&path)
            .expect("open")
            .collect::<Result<_, _>>()
            .expect("rows");
        assert_eq!(back, vec![row(0), row(1)]);
    }

    #[test]
    fn bad_rows_name_their_line() {
        let text = format!(
            "{}\nsweep,0,0,0,x,5180,80,1,2,3,4,0,-40,0,,ok\n",
            EXCHANGES_HEADER.join(",")
        );
        let mut it = read_from(text.as_bytes(), "e.csv".into()).expect("header");
        let err = it.next().expect("one row").unwrap_err().to_string();
        assert!(err.starts_with("e.csv:2: column 5"), "{err}");
    }

    #[test]
    fn reads_every_value_as_serde_does() {
        // Odd but valid spellings (leading `+`, leading zeros, `0x`, exponents, extra and
        // reordered columns) must read exactly as serde's csv deserializer reads them.
        let text = "note,status,temp_c,ref_gain,dut_rssi_dbm,dut_gain,t4_ps,t3_ps,t2_ps,t1_ps,\
                    bw_mhz,center_mhz,atten_db,seq,burst,point,stage\n\
                    a,ok,24.5,0,-61.25,2,4,3,0x10,+1,80,5180,17.25,0,1,2,sweep\n\
                    b,lost,,,,,,,,281474976710655,040,05180,1e1,7,0,0,sweep 2\n\
                    c,ok,-1.5E-3,1,-40,0,18446744073709551615,3,2,1,20,5180,-0.0,3,4294967295,9,x\n";
        let mut fast = read_from(text.as_bytes(), "e.csv".into()).expect("header");
        let mut rdr = csv::Reader::from_reader(text.as_bytes());
        for want in rdr.deserialize::<Exchange>() {
            let want = want.expect("serde reads it");
            let got = fast.next().expect("a row").expect("fast reads it");
            assert_eq!(got, want);
            assert_eq!(got.atten_db.to_bits(), want.atten_db.to_bits());
        }
        assert!(fast.next().is_none());
    }

    #[test]
    fn out_of_range_and_malformed_values_name_line_and_column() {
        let header = EXCHANGES_HEADER.join(",");
        for (row, column) in [
            ("sweep,4294967296,0,0,1,5180,80,1,2,3,4,0,-40,0,,ok", 2),
            (
                "sweep,0,0,0,1,5180,80,1,2,3,18446744073709551616,0,-40,0,,ok",
                11,
            ),
            ("sweep,0,0,0,1,5180,80,1,2,3,4,-1,-40,0,,ok", 12),
            ("sweep,0,0,0,1,5180,80,1,2,3,4,0,-40,0,warm,ok", 15),
        ] {
            let text = format!("{header}\n{row}\n");
            let mut it = read_from(text.as_bytes(), "e.csv".into()).expect("header");
            let err = it.next().expect("one row").unwrap_err().to_string();
            assert!(
                err.starts_with(&format!("e.csv:2: column {column}:")),
                "{err}"
            );
        }
    }

    proptest::proptest! {
        #[test]
        fn short_decimals_read_as_the_standard_parser_reads_them(
            text in "-?[0-9]{1,8}(\\.[0-9]{1,7})?",
            noise in "[-+.eE0-9]{0,17}",
        ) {
            let want = text.parse::<f64>().ok().map(f64::to_bits);
            proptest::prop_assert_eq!(short_decimal(text.as_bytes()).map(f64::to_bits), want);
            if let Some(v) = short_decimal(noise.as_bytes()) {
                proptest::prop_assert_eq!(Some(v.to_bits()), noise.parse::<f64>().ok().map(f64::to_bits));
            }
        }

        #[test]
        fn decimal_agrees_with_the_standard_parser(digits in "[0-9]{1,19}", noise in "[ -~]{0,20}") {
            proptest::prop_assert_eq!(decimal(digits.as_bytes()), digits.parse::<u64>().ok());
            // Anything else is either refused or read as the standard parser reads it.
            if let Some(v) = decimal(noise.as_bytes()) {
                proptest::prop_assert_eq!(Some(v), noise.parse::<u64>().ok());
            }
        }
    }

    #[test]
    fn missing_columns_are_named() {
        let err = read_from("stage,point\n".as_bytes(), "e.csv".into())
            .err()
            .expect("error");
        assert_eq!(err.to_string(), "e.csv: the header has no `burst` column");
    }
}
