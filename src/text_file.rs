//! Reading a recipe, bench, script or driver file whole, up to a bound: these are a few KiB,
//! and a path to something endless (`/dev/zero`, a FIFO, a log named by mistake) must end in an
//! error, not in gigabytes of memory.

use std::fs::File;
use std::io::{self, Read};
use std::path::Path;

/// The largest recipe, bench, script or driver file read: 1 MiB.
pub const MAX_TEXT_FILE_BYTES: u64 = 1 << 20;

/// The text of `path`, read whole; an error if it is larger than [`MAX_TEXT_FILE_BYTES`] or
/// not UTF-8. Reads at most one byte past the bound, whatever the file.
pub fn read(path: &Path) -> io::Result<String> {
    let mut bytes = Vec::new();
    File::open(path)?
        .take(MAX_TEXT_FILE_BYTES + 1)
        .read_to_end(&mut bytes)?;
    if bytes.len() as u64 > MAX_TEXT_FILE_BYTES {
        return Err(io::Error::new(
            io::ErrorKind::InvalidData,
            format!(
                "larger than {} MiB, the limit for recipe, bench, script and driver files",
                MAX_TEXT_FILE_BYTES >> 20
            ),
        ));
    }
    String::from_utf8(bytes)
        .map_err(|e| io::Error::new(io::ErrorKind::InvalidData, format!("not UTF-8 text: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reads_up_to_the_bound_and_refuses_past_it() {
        let dir = tempfile::tempdir().expect("temp dir");
        let at_bound = dir.path().join("at.toml");
        std::fs::write(&at_bound, "#".repeat(MAX_TEXT_FILE_BYTES as usize)).expect("write");
        assert_eq!(
            read(&at_bound).expect("read").len() as u64,
            MAX_TEXT_FILE_BYTES
        );
        let past = dir.path().join("past.toml");
        std::fs::write(&past, "#".repeat(MAX_TEXT_FILE_BYTES as usize + 1)).expect("write");
        let e = read(&past).expect_err("too large");
        assert!(e.to_string().starts_with("larger than 1 MiB"), "{e}");
        let bad = dir.path().join("bad.toml");
        std::fs::write(&bad, b"a = \xff").expect("write");
        assert!(read(&bad)
            .expect_err("not UTF-8")
            .to_string()
            .starts_with("not UTF-8"));
    }

    #[cfg(unix)]
    #[test]
    fn an_endless_file_is_refused() {
        let e = read(Path::new("/dev/zero")).expect_err("endless");
        assert!(e.to_string().starts_with("larger than 1 MiB"), "{e}");
    }
}
