//! `exchanges.csv`: writing it a burst at a time, and reading it back as a stream.

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
pub fn read_exchanges(
    path: &Path,
) -> Result<impl Iterator<Item = Result<Exchange, ReadError>>, ReadError> {
    let name = path.display().to_string();
    let file = File::open(path).map_err(|source| ReadError::Io {
        path: name.clone(),
        source,
    })?;
    read_from(file, name)
}

/// Streams rows from any reader (`name` labels errors).
pub fn read_from<R: Read>(
    reader: R,
    name: String,
) -> Result<impl Iterator<Item = Result<Exchange, ReadError>>, ReadError> {
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .from_reader(reader);
    let headers = rdr.headers().map_err(|e| ReadError::Row {
        path: name.clone(),
        line: 1,
        message: e.to_string(),
    })?;
    if let Some(missing) = EXCHANGES_HEADER
        .iter()
        .find(|c| !headers.iter().any(|h| h == **c))
    {
        return Err(ReadError::MissingColumn {
            path: name,
            column: (*missing).to_string(),
        });
    }
    Ok(rdr.into_deserialize::<Exchange>().map(move |r| {
        r.map_err(|e| {
            let line = e.position().map_or(0, |p| p.line());
            let message = match e.kind() {
                csv::ErrorKind::Deserialize { err, .. } => match err.field() {
                    Some(i) => format!("column {}: {}", i + 1, err.kind()),
                    None => err.kind().to_string(),
                },
                _ => e.to_string(),
            };
            ReadError::Row {
                path: name.clone(),
                line,
                message,
            }
        })
    }))
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
    fn missing_columns_are_named() {
        let err = read_from("stage,point\n".as_bytes(), "e.csv".into())
            .err()
            .expect("error");
        assert_eq!(err.to_string(), "e.csv: the header has no `burst` column");
    }
}
