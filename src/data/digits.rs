//! Numbers spelt in ASCII, read without the standard parsers' general machinery: eight digits
//! of a word at once, and the short decimals taucal writes. Shared by the field-by-field reader
//! (`csv_io.rs`) and the plain-line reader (`plain_line.rs`).

/// `0` in every byte of a word.
pub(super) const ZEROS: u64 = 0x3030_3030_3030_3030;

/// The value of a word of eight ASCII digits, loaded little-endian (byte `i` holds digit `i`,
/// the first most significant): three multiply-and-shift steps combine neighbours into pairs,
/// fours and the eight (each lane stays below its width, so no carries).
pub(super) fn digits_value(word: u64) -> u64 {
    let v = word - ZEROS;
    let v = (v * 10 + (v >> 8)) & 0x00FF_00FF_00FF_00FF;
    let v = (v * 100 + (v >> 16)) & 0x0000_FFFF_0000_FFFF;
    (v * 10_000 + (v >> 32)) & 0xFFFF_FFFF
}

/// Exact powers of ten up to 10^15 (every one is an f64 without rounding).
const POWERS_OF_TEN: [f64; 16] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
];

/// The longest start of `bytes` spelt `[-]digits[.digits]`, and its length; `None` if there is
/// none or it has more than 15 digits. The digits form an integer below 2^53 and the divisor is
/// an exact power of ten, so the one division is correctly rounded.
pub(super) fn short_decimal_prefix(bytes: &[u8]) -> Option<(f64, usize)> {
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
