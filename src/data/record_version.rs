//! The versions of `exchanges.csv`: which columns a file has, told from its header.
//!
//! Versions only ever append columns, so every file has version 1's sixteen and a reader takes
//! any version. A writer adding rows to an existing file must write that file's own version:
//! one file never mixes two headers' rows.

use super::Exchange;
use std::io::{self, Read};
use std::path::Path;

/// Columns of version 1: every exchanges file has these.
pub const V1_COLUMNS: usize = 16;

/// Every column of `exchanges.csv` in the order taucal writes them: version 1's sixteen, then
/// the four version 2 appended (contract; never reordered or renamed).
pub const EXCHANGES_COLUMNS: [&str; 20] = [
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
    "time_s",
    "rtt_ps",
    "range_mm",
    "frames",
];

/// The columns every exchanges file has (version 1's header); later versions append to them.
pub const EXCHANGES_HEADER: [&str; V1_COLUMNS] = first_columns();

const fn first_columns() -> [&'static str; V1_COLUMNS] {
    let mut out = [""; V1_COLUMNS];
    let mut i = 0;
    while i < V1_COLUMNS {
        out[i] = EXCHANGES_COLUMNS[i];
        i += 1;
    }
    out
}

/// The longest header line looked at when telling a file's version.
const HEADER_BYTES: u64 = 64 * 1024;

/// A version of the `exchanges.csv` record.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RecordVersion {
    /// The sixteen columns from `stage` to `status`.
    V1,
    /// Version 1, then `time_s,rtt_ps,range_mm,frames`.
    V2,
}

impl RecordVersion {
    /// The version new runs write.
    pub const CURRENT: RecordVersion = RecordVersion::V2;

    /// The number the manifest records (`record_version`).
    pub fn number(self) -> u32 {
        match self {
            RecordVersion::V1 => 1,
            RecordVersion::V2 => 2,
        }
    }

    /// The version numbered `n`, if there is one.
    pub fn from_number(n: u32) -> Option<RecordVersion> {
        match n {
            1 => Some(RecordVersion::V1),
            2 => Some(RecordVersion::V2),
            _ => None,
        }
    }

    /// Its columns, in the order taucal writes them.
    pub fn columns(self) -> &'static [&'static str] {
        match self {
            RecordVersion::V1 => &EXCHANGES_COLUMNS[..V1_COLUMNS],
            RecordVersion::V2 => &EXCHANGES_COLUMNS,
        }
    }

    /// The version whose header line (without its line end) is `line`, exactly as taucal
    /// writes it.
    pub fn of_header(line: &[u8]) -> Option<RecordVersion> {
        [RecordVersion::V1, RecordVersion::V2]
            .into_iter()
            .find(|v| line == v.columns().join(",").as_bytes())
    }

    /// The version of the exchanges file at `path`, from its header line. An error (kind
    /// `InvalidData`) when the header is not one taucal writes: rows added after it in taucal's
    /// order would not line up with its columns.
    pub fn of_file(path: &Path) -> io::Result<RecordVersion> {
        let mut head = Vec::new();
        std::fs::File::open(path)?
            .take(HEADER_BYTES)
            .read_to_end(&mut head)?;
        let end = head.iter().position(|&b| b == b'\n').unwrap_or(head.len());
        let line = head[..end].strip_suffix(b"\r").unwrap_or(&head[..end]);
        RecordVersion::of_header(line).ok_or_else(|| {
            io::Error::new(
                io::ErrorKind::InvalidData,
                format!(
                    "its header is neither version 1 ({}) nor version 2 (version 1, then {}) as \
                     taucal writes them, so rows cannot be added to it",
                    RecordVersion::V1.columns().join(","),
                    EXCHANGES_COLUMNS[V1_COLUMNS..].join(",")
                ),
            )
        })
    }

    /// `row` as a file of this version keeps it, which is what reading it back gives: version
    /// 1 has no bench time (and no room for the other appended fields), version 2 keeps bench
    /// time to the microsecond.
    pub fn kept(self, row: &Exchange) -> Exchange {
        let mut kept = row.clone();
        match self {
            RecordVersion::V1 => {
                kept.time_s = None;
                kept.rtt_ps = None;
                kept.range_mm = None;
                kept.frames = 1;
            }
            RecordVersion::V2 => kept.time_s = row.time_s.map(to_microseconds),
        }
        kept
    }
}

/// Bench time as written: six decimals, to the microsecond (a burst takes milliseconds).
pub fn time_text(time_s: f64) -> String {
    format!("{time_s:.6}")
}

/// Bench time rounded as [`time_text`] writes it and read back.
fn to_microseconds(time_s: f64) -> f64 {
    time_text(time_s).parse().unwrap_or(time_s)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn versions_append_columns_and_are_told_from_their_headers() {
        // Contract (design §4 and §6): version 2 is version 1's sixteen columns, then four.
        assert_eq!(
            RecordVersion::V1.columns().join(","),
            "stage,point,burst,seq,atten_db,center_mhz,bw_mhz,t1_ps,t2_ps,t3_ps,t4_ps,dut_gain,\
             dut_rssi_dbm,ref_gain,temp_c,status"
        );
        assert_eq!(
            RecordVersion::V2.columns().join(","),
            format!(
                "{},time_s,rtt_ps,range_mm,frames",
                RecordVersion::V1.columns().join(",")
            )
        );
        assert_eq!(EXCHANGES_HEADER, RecordVersion::V1.columns());
        for v in [RecordVersion::V1, RecordVersion::V2] {
            assert_eq!(RecordVersion::from_number(v.number()), Some(v));
            assert_eq!(
                RecordVersion::of_header(v.columns().join(",").as_bytes()),
                Some(v)
            );
        }
        assert_eq!(RecordVersion::from_number(3), None);
        let reordered = "point,stage,burst,seq,atten_db,center_mhz,bw_mhz,t1_ps,t2_ps,t3_ps,\
                         t4_ps,dut_gain,dut_rssi_dbm,ref_gain,temp_c,status";
        assert_eq!(RecordVersion::of_header(reordered.as_bytes()), None);
    }

    #[test]
    fn a_files_version_comes_from_its_first_line() {
        let dir = tempfile::tempdir().expect("tempdir");
        let path = dir.path().join("e.csv");
        for (text, want) in [
            (
                format!("{}\r\nsweep,0\r\n", EXCHANGES_HEADER.join(",")),
                Some(RecordVersion::V1),
            ),
            (
                format!("{}\n", EXCHANGES_COLUMNS.join(",")),
                Some(RecordVersion::V2),
            ),
            (EXCHANGES_COLUMNS[..18].join(","), None),
            (String::new(), None),
        ] {
            std::fs::write(&path, &text).expect("write");
            let got = RecordVersion::of_file(&path);
            match want {
                Some(v) => assert_eq!(got.expect("a version"), v, "{text}"),
                None => {
                    let e = got.expect_err("no version");
                    assert_eq!(e.kind(), io::ErrorKind::InvalidData);
                    assert!(e.to_string().contains("neither version 1"), "{e}");
                }
            }
        }
    }

    #[test]
    fn bench_time_is_kept_to_the_microsecond() {
        let row = Exchange {
            time_s: Some(12.345_678_9),
            rtt_ps: Some(1.5),
            range_mm: Some(-2.0),
            frames: 16,
            ..Exchange::default()
        };
        let v2 = RecordVersion::V2.kept(&row);
        assert_eq!(v2.time_s, Some(12.345_679));
        assert_eq!(
            (v2.rtt_ps, v2.range_mm, v2.frames),
            (Some(1.5), Some(-2.0), 16)
        );
        let v1 = RecordVersion::V1.kept(&row);
        assert_eq!(
            (v1.time_s, v1.rtt_ps, v1.range_mm, v1.frames),
            (None, None, None, 1)
        );
        assert_eq!(time_text(0.0), "0.000000");
        assert_eq!(time_text(86_399.999_999_6), "86400.000000");
    }
}
