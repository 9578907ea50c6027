//! Reading a plain line of an exchanges file straight into a row, without splitting it first.
//!
//! A line taucal writes spells every value one way: plain digits, a short decimal, an empty
//! optional cell, a label without quotes. Each field is read where it starts, eight bytes at a
//! time, and ends where its value ends, so the line is passed over once. A line spelt any other
//! way is declined and left to the splitter and the field-by-field reader, which read it to the
//! same values (they accept every spelling read here, to the same bits) or to the error.

use super::csv_io::Columns;
use super::digits::{digits_value, short_decimal_prefix, ZEROS};
use super::record_split::{below_dash, word_at};
use super::record_version::V1_COLUMNS;
use super::{Exchange, TIMESTAMP_END_PS};

/// The high bit of every byte of a word.
const HIGH_BITS: u64 = 0x8080_8080_8080_8080;

/// Ten in every byte of a word.
const TENS: u64 = 0x0A0A_0A0A_0A0A_0A0A;

/// Powers of ten up to 10^8, for the digits after the first eight.
const POWERS_OF_TEN: [u64; 9] = [
    1,
    10,
    100,
    1_000,
    10_000,
    100_000,
    1_000_000,
    10_000_000,
    100_000_000,
];

/// The row field a column of the file holds.
#[derive(Clone, Copy)]
enum Slot {
    Other,
    Stage,
    Point,
    Burst,
    Seq,
    Atten,
    Center,
    Bandwidth,
    T1,
    T2,
    T3,
    T4,
    DutGain,
    DutRssi,
    RefGain,
    Temp,
    Status,
    Time,
    Rtt,
    Range,
    Frames,
}

/// The contract columns' fields, in `EXCHANGES_COLUMNS` order.
const CONTRACT: [Slot; 20] = [
    Slot::Stage,
    Slot::Point,
    Slot::Burst,
    Slot::Seq,
    Slot::Atten,
    Slot::Center,
    Slot::Bandwidth,
    Slot::T1,
    Slot::T2,
    Slot::T3,
    Slot::T4,
    Slot::DutGain,
    Slot::DutRssi,
    Slot::RefGain,
    Slot::Temp,
    Slot::Status,
    Slot::Time,
    Slot::Rtt,
    Slot::Range,
    Slot::Frames,
];

/// The order of a file's columns.
#[derive(Clone, Copy, PartialEq)]
enum Order {
    /// Version 1's, exactly, as taucal wrote them.
    V1,
    /// Version 2's, exactly, as taucal writes them.
    V2,
    /// Any other.
    Other,
}

/// Reads plain lines of one file, whose header fixed the columns.
pub(crate) struct LineParser {
    /// What each column of the file holds, in the file's order.
    slots: Vec<Slot>,
    /// Whether the columns are a version's, in its order, as taucal writes them.
    order: Order,
    /// The stage and status of the line read last: kept here, not written into the row, as the
    /// next line most often repeats them.
    labels: Labels,
}

/// The stage and status read last, and a version that changes whenever either does.
#[derive(Default)]
struct Labels {
    stage: Label,
    status: Label,
    version: u64,
}

impl Labels {
    /// Reads the stage at `at`; where it ends.
    fn read_stage(&mut self, bytes: &[u8], at: usize) -> Option<usize> {
        let (end, new) = self.stage.read(bytes, at)?;
        self.version += u64::from(new);
        Some(end)
    }

    /// Reads the status at `at`; where it ends.
    fn read_status(&mut self, bytes: &[u8], at: usize) -> Option<usize> {
        let (end, new) = self.status.read(bytes, at)?;
        self.version += u64::from(new);
        Some(end)
    }
}

impl LineParser {
    /// `columns[i]` is the file column of contract column `i`, if the file has it; the header
    /// has `fields` columns.
    pub(crate) fn new(columns: &Columns, fields: usize) -> Self {
        let mut slots = vec![Slot::Other; fields];
        for (&slot, column) in CONTRACT.iter().zip(columns) {
            if let Some(&column) = column.as_ref() {
                slots[column] = slot;
            }
        }
        // The first `n` contract columns, in order, and nothing else.
        let in_order = |n: usize| {
            let first_n = (0..n)
                .map(Some)
                .chain(std::iter::repeat_n(None, columns.len() - n));
            fields == n && columns.iter().copied().eq(first_n)
        };
        let order = if in_order(V1_COLUMNS) {
            Order::V1
        } else if in_order(CONTRACT.len()) {
            Order::V2
        } else {
            Order::Other
        };
        LineParser {
            order,
            slots,
            labels: Labels::default(),
        }
    }

    /// The stage and status of the line read last.
    pub(crate) fn labels(&self) -> (&str, &str) {
        (&self.labels.stage.text, &self.labels.status.text)
    }

    /// Changes whenever [`labels`](LineParser::labels) do.
    pub(crate) fn labels_version(&self) -> u64 {
        self.labels.version
    }

    /// Reads the line whose first field starts at `from`, its numbers into `row` and its labels
    /// into [`labels`](LineParser::labels), and returns where its last field ends (the caller
    /// checks a line end is there); `None` as soon as a field is not spelt plainly, with `row`
    /// partly written. `bytes` must hold eight bytes or more after every byte up to the line's
    /// end.
    pub(crate) fn parse(&mut self, bytes: &[u8], from: usize, row: &mut Exchange) -> Option<usize> {
        if self.order != Order::V2 {
            // Appended columns a file lacks read as empty, and a row as one frame.
            not_reported(row);
        }
        if self.order != Order::Other {
            return self.read_in_contract_order(bytes, from, row);
        }
        let mut at = from;
        for (i, slot) in self.slots.iter().enumerate() {
            if i > 0 {
                at = after_comma(bytes, at)?;
            }
            at = match slot {
                Slot::Other => field_end(bytes, at)?,
                Slot::Stage => self.labels.read_stage(bytes, at)?,
                Slot::Point => small(bytes, at, &mut row.point)?,
                Slot::Burst => small(bytes, at, &mut row.burst)?,
                Slot::Seq => small(bytes, at, &mut row.seq)?,
                Slot::Atten => float(bytes, at, &mut row.atten_db)?,
                Slot::Center => small(bytes, at, &mut row.center_mhz)?,
                Slot::Bandwidth => small(bytes, at, &mut row.bw_mhz)?,
                Slot::T1 => optional(bytes, at, &mut row.t1_ps, wide)?,
                Slot::T2 => optional(bytes, at, &mut row.t2_ps, wide)?,
                Slot::T3 => optional(bytes, at, &mut row.t3_ps, wide)?,
                Slot::T4 => optional(bytes, at, &mut row.t4_ps, wide)?,
                Slot::DutGain => optional(bytes, at, &mut row.dut_gain, small)?,
                Slot::DutRssi => optional(bytes, at, &mut row.dut_rssi_dbm, float)?,
                Slot::RefGain => optional(bytes, at, &mut row.ref_gain, small)?,
                Slot::Temp => optional(bytes, at, &mut row.temp_c, float)?,
                Slot::Status => self.labels.read_status(bytes, at)?,
                Slot::Time => optional(bytes, at, &mut row.time_s, float)?,
                Slot::Rtt => optional(bytes, at, &mut row.rtt_ps, float)?,
                Slot::Range => optional(bytes, at, &mut row.range_mm, float)?,
                Slot::Frames => frames(bytes, at, &mut row.frames)?,
            };
        }
        Some(at)
    }

    /// [`parse`](LineParser::parse) for a version's columns in its order, spelt out: the loop
    /// jumps through a table for every field, and the reading thread took about a tenth more
    /// instructions with it (callgrind).
    fn read_in_contract_order(
        &mut self,
        bytes: &[u8],
        from: usize,
        row: &mut Exchange,
    ) -> Option<usize> {
        let at = self.labels.read_stage(bytes, from)?;
        let at = small(bytes, after_comma(bytes, at)?, &mut row.point)?;
        let at = small(bytes, after_comma(bytes, at)?, &mut row.burst)?;
        let at = small(bytes, after_comma(bytes, at)?, &mut row.seq)?;
        let at = float(bytes, after_comma(bytes, at)?, &mut row.atten_db)?;
        let at = small(bytes, after_comma(bytes, at)?, &mut row.center_mhz)?;
        let at = small(bytes, after_comma(bytes, at)?, &mut row.bw_mhz)?;
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.t1_ps, wide)?;
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.t2_ps, wide)?;
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.t3_ps, wide)?;
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.t4_ps, wide)?;
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.dut_gain, small)?;
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.dut_rssi_dbm, float)?;
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.ref_gain, small)?;
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.temp_c, float)?;
        let at = self.labels.read_status(bytes, after_comma(bytes, at)?)?;
        if self.order == Order::V1 {
            return Some(at);
        }
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.time_s, float)?;
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.rtt_ps, float)?;
        let at = optional(bytes, after_comma(bytes, at)?, &mut row.range_mm, float)?;
        frames(bytes, after_comma(bytes, at)?, &mut row.frames)
    }
}

/// The appended fields of a row whose file has no column for them: not reported, one frame.
fn not_reported(row: &mut Exchange) {
    row.time_s = None;
    row.rtt_ps = None;
    row.range_mm = None;
    row.frames = 1;
}

/// Frames behind a row: 1 or more (the field reader names 0 as an error).
fn frames(bytes: &[u8], at: usize, out: &mut u32) -> Option<usize> {
    let end = small(bytes, at, out)?;
    (*out > 0).then_some(end)
}

/// Where the next field starts, if a comma is at `at`.
fn after_comma(bytes: &[u8], at: usize) -> Option<usize> {
    (bytes[at] == b',').then_some(at + 1)
}

/// A label read before (a stage, a status): a burst repeats its stage, and most statuses are
/// `ok`, so the next is most often the same. Kept also as words, to match it again eight bytes
/// at a time.
#[derive(Default)]
struct Label {
    text: String,
    /// `text` as little-endian words, the last padded with zero bytes.
    words: Vec<u64>,
}

impl Label {
    /// Reads the label at `at`: where it ends, and whether it differs from the one before. The
    /// same label as before is matched whole, without looking for its end or checking its UTF-8
    /// again. Declined if not UTF-8.
    fn read(&mut self, bytes: &[u8], at: usize) -> Option<(usize, bool)> {
        let new = !self.matches(bytes, at);
        if new {
            let end = field_end(bytes, at)?;
            self.set(std::str::from_utf8(&bytes[at..end]).ok()?);
        }
        Some((at + self.text.len(), new))
    }

    /// Whether the field at `at` is this label: its bytes, then a comma or line end.
    fn matches(&self, bytes: &[u8], at: usize) -> bool {
        let len = self.text.len();
        if bytes.len() <= at + 8 * self.words.len() {
            return false;
        }
        let mut left = len;
        for (i, &word) in self.words.iter().enumerate() {
            let mask = if left >= 8 {
                u64::MAX
            } else {
                (1 << (8 * left)) - 1
            };
            if word_at(bytes, at + 8 * i) & mask != word {
                return false;
            }
            left = left.saturating_sub(8);
        }
        is_separator(bytes[at + len])
    }

    /// Makes `text` the label to match.
    fn set(&mut self, text: &str) {
        self.text.clear();
        self.text.push_str(text);
        self.words.clear();
        self.words.extend(text.as_bytes().chunks(8).map(|chunk| {
            let mut word = [0; 8];
            word[..chunk.len()].copy_from_slice(chunk);
            u64::from_le_bytes(word)
        }));
    }
}

/// Where the field from `at` ends: at the first comma, CR or LF. Other bytes below `-` (spaces,
/// some punctuation) are text; a quote declines the line.
fn field_end(bytes: &[u8], mut at: usize) -> Option<usize> {
    loop {
        let word = word_at(bytes, at);
        let mut below = below_dash(word);
        while below != 0 {
            let shift = below.trailing_zeros() - 7;
            match (word >> shift) as u8 {
                b',' | b'\n' | b'\r' => return Some(at + (shift / 8) as usize),
                b'"' => return None,
                _ => below &= below - 1,
            }
        }
        at += 8;
    }
}

/// A decimal written `[-]digits[.digits]`, 15 digits at most.
fn float(bytes: &[u8], at: usize, out: &mut f64) -> Option<usize> {
    let (value, len) = short_decimal_prefix(&bytes[at..])?;
    *out = value;
    Some(at + len)
}

/// 1 to 9 plain decimal digits (so the value fits a `u32`), one at a time: these are short.
fn small(bytes: &[u8], at: usize, out: &mut u32) -> Option<usize> {
    let mut value = 0u32;
    let mut end = at;
    loop {
        let digit = bytes[end].wrapping_sub(b'0');
        if digit > 9 {
            break;
        }
        if end - at == 9 {
            return None;
        }
        value = value * 10 + u32::from(digit);
        end += 1;
    }
    *out = value;
    (end > at).then_some(end)
}

/// A timestamp: 1 to 15 plain decimal digits, below 2^48 (the field reader names the error).
fn wide(bytes: &[u8], at: usize, out: &mut u64) -> Option<usize> {
    let (value, end) = digits(bytes, at)?;
    *out = value;
    (value < TIMESTAMP_END_PS).then_some(end)
}

/// A field ends at a comma or a line end.
fn is_separator(byte: u8) -> bool {
    matches!(byte, b',' | b'\n' | b'\r')
}

/// An optional cell: empty (a separator right away) is none, else what `read` makes of it.
fn optional<T: Default>(
    bytes: &[u8],
    at: usize,
    out: &mut Option<T>,
    read: fn(&[u8], usize, &mut T) -> Option<usize>,
) -> Option<usize> {
    if is_separator(bytes[at]) {
        *out = None;
        return Some(at);
    }
    let value = out.get_or_insert_with(T::default);
    read(bytes, at, value)
}

/// The digits from `at`, 1 to 15 of them, eight at a time: their value and where they end (at
/// a byte that is not a digit). `None` for no digit or more than 15.
fn digits(bytes: &[u8], at: usize) -> Option<(u64, usize)> {
    let first = word_at(bytes, at);
    let count = non_digits(first).trailing_zeros() as usize / 8;
    if count < 8 {
        return (count > 0).then(|| (leading_digits(first, count), at + count));
    }
    let second = word_at(bytes, at + 8);
    let count = non_digits(second).trailing_zeros() as usize / 8;
    if count == 8 {
        return None;
    }
    let value = digits_value(first) * POWERS_OF_TEN[count] + leading_digits(second, count);
    Some((value, at + 8 + count))
}

/// The high bit of each byte of `word` that is not an ASCII digit. Per byte, with no carry
/// between bytes: a digit less `0` is below ten, so `(b ^ 0x30 | 0x80) - 10` keeps its high bit
/// set exactly when the low seven bits of `b ^ 0x30` are ten or more; or-ing `b ^ 0x30` back
/// in catches the bytes whose own high bit is set.
fn non_digits(word: u64) -> u64 {
    let offset = word ^ ZEROS;
    (((offset | HIGH_BITS) - TENS) | offset) & HIGH_BITS
}

/// The value of the first `count` (0 to 8) bytes of `word`, all digits: shifted up to the top
/// of the word, below `0`s.
fn leading_digits(word: u64, count: usize) -> u64 {
    let bits = 8 * count as u32;
    let top = word.checked_shl(64 - bits).unwrap_or(0);
    digits_value(top | ZEROS.checked_shr(bits).unwrap_or(0))
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// `text` followed by a comma and the eight bytes of slack a line's reader may load.
    fn padded(text: &str) -> Vec<u8> {
        let mut bytes = text.as_bytes().to_vec();
        bytes.extend_from_slice(b",\n\0\0\0\0\0\0\0\0");
        bytes
    }

    /// Checks that `read` takes the leading digits of `text` to the value `str::parse` gives
    /// when there are one to `most` of them, and declines them otherwise.
    fn reads_as_parse<T>(
        text: &str,
        most: usize,
        read: fn(&[u8], usize, &mut T) -> Option<usize>,
    ) -> Result<(), TestCaseError>
    where
        T: std::str::FromStr + Default + PartialEq + std::fmt::Debug,
    {
        let bytes = padded(text);
        let digits = text.bytes().take_while(u8::is_ascii_digit).count();
        let mut got = T::default();
        let end = read(&bytes, 0, &mut got);
        if (1..=most).contains(&digits) {
            prop_assert_eq!(end, Some(digits));
            prop_assert_eq!(Some(got), text[..digits].parse::<T>().ok());
        } else {
            prop_assert_eq!(end, None);
        }
        Ok(())
    }

    proptest! {
        #[test]
        fn a_float_reads_as_the_standard_library_parses_its_digits(
            text in "-?[0-9]{0,17}(\\.[0-9]{0,17})?[.e,x]?",
        ) {
            // Reference: Rust's `str::parse::<f64>`, correctly rounded (IEEE 754
            // round-to-nearest), over the longest `[-]digits[.digits]` start of the text; the
            // word-at-a-time path and the byte-by-byte one must read the same span to the bit.
            let bytes = padded(&text);
            let mut got = f64::NAN;
            let read = float(&bytes, 0, &mut got);
            prop_assert_eq!(read, short_decimal_prefix(&bytes).map(|(_, len)| len));
            if let Some(end) = read {
                let want: f64 = text[..end].parse().expect("a decimal");
                prop_assert_eq!(got.to_bits(), want.to_bits(), "{}", &text[..end]);
            }
        }

        #[test]
        fn a_count_reads_as_the_standard_library_parses_it(text in "[0-9]{0,11}[,a.]?") {
            // Reference: Rust's `str::parse::<u32>` over the leading digits, for one to nine of
            // them; ten or more are declined (the field-by-field reader takes the line).
            reads_as_parse(&text, 9, small)?;
        }

        #[test]
        fn digits_read_as_the_standard_library_parses_them(text in "[0-9]{0,17}[,a.]?") {
            // Reference: Rust's `str::parse::<u64>`, for one to fifteen digits.
            reads_as_parse(&text, 15, |bytes, at, out| {
                let (value, end) = digits(bytes, at)?;
                *out = value;
                Some(end)
            })?;
        }

        #[test]
        fn a_timestamp_is_read_below_2_48_and_declined_from_it(value in 0u64..(1 << 49)) {
            // FTM counters are 48 bits (IEEE 802.11-2016, 6-octet TOD/TOA fields): the field
            // reader names a larger value as an error.
            let text = value.to_string();
            let mut got = 0;
            let end = wide(&padded(&text), 0, &mut got);
            prop_assert_eq!(end, (value < (1 << 48)).then_some(text.len()));
            prop_assert!(end.is_none() || got == value);
        }
    }
}
