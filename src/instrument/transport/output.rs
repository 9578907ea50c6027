//! A program's output read within bounds: lines cut at a fixed length and a tail of fixed size,
//! so a program that writes without end costs a known amount of memory. Pure: bytes in, lines
//! out.

/// Longest stderr line kept whole; the rest of a longer line is dropped and marked.
pub const STDERR_LINE_CHARS: usize = 512;

/// Splits bytes into lines (LF, CR LF) and cuts each at `max_bytes`, holding at most that much
/// of an unfinished line.
#[derive(Debug, Clone)]
pub struct BoundedLines {
    max_bytes: usize,
    pending: Vec<u8>,
    cut: bool,
}

impl BoundedLines {
    /// Lines cut at `max_bytes`.
    pub fn new(max_bytes: usize) -> Self {
        BoundedLines {
            max_bytes,
            pending: Vec::new(),
            cut: false,
        }
    }

    /// Adds bytes as they were read and returns the lines they complete.
    pub fn push(&mut self, bytes: &[u8]) -> Vec<String> {
        let mut lines = Vec::new();
        for &b in bytes {
            if b == b'\n' {
                lines.push(self.take());
            } else if self.pending.len() < self.max_bytes {
                self.pending.push(b);
            } else {
                self.cut = true;
            }
        }
        lines
    }

    /// The unfinished last line, if any, once the output has ended.
    pub fn finish(&mut self) -> Option<String> {
        (!self.pending.is_empty() || self.cut).then(|| self.take())
    }

    fn take(&mut self) -> String {
        if self.pending.last() == Some(&b'\r') {
            self.pending.pop();
        }
        let mut line = String::from_utf8_lossy(&self.pending).into_owned();
        if self.cut {
            line.push_str(" […cut]");
        }
        self.pending.clear();
        self.cut = false;
        line
    }
}

/// The last `max_bytes` of an output, for an error message.
#[derive(Debug, Clone)]
pub struct Tail {
    max_bytes: usize,
    kept: std::collections::VecDeque<u8>,
}

impl Tail {
    /// Keeps the last `max_bytes`.
    pub fn new(max_bytes: usize) -> Self {
        Tail {
            max_bytes,
            kept: std::collections::VecDeque::with_capacity(max_bytes),
        }
    }

    /// Adds bytes as they were read, forgetting the oldest beyond the bound.
    pub fn push(&mut self, bytes: &[u8]) {
        let skip = bytes.len().saturating_sub(self.max_bytes);
        for &b in &bytes[skip..] {
            if self.kept.len() == self.max_bytes {
                self.kept.pop_front();
            }
            self.kept.push_back(b);
        }
    }

    /// What is kept, trimmed, as text (invalid UTF-8 replaced).
    pub fn text(&self) -> String {
        let bytes: Vec<u8> = self.kept.iter().copied().collect();
        String::from_utf8_lossy(&bytes).trim().to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lines_are_split_across_reads_and_cut_at_their_bound() {
        let mut l = BoundedLines::new(8);
        assert!(l.push(b"warm").is_empty());
        assert_eq!(l.push(b"ing\r\nok\n0123456789abc"), ["warming", "ok"]);
        // The long line held only its first 8 bytes however much more came.
        assert!(l.push(&[b'x'; 100_000]).is_empty());
        assert_eq!(l.pending.len(), 8);
        assert_eq!(l.push(b"\nlast"), ["01234567 […cut]"]);
        assert_eq!(l.finish(), Some("last".to_string()));
        assert_eq!(l.finish(), None);
    }

    #[test]
    fn the_tail_keeps_the_last_bytes_only() {
        let mut t = Tail::new(10);
        t.push(b"error: first\n");
        t.push(b"fatal: ");
        t.push(b"disk\n");
        assert_eq!(t.text(), "tal: disk");
        t.push(&[b'y'; 1_000_000]);
        assert_eq!(t.kept.len(), 10);
        assert_eq!(t.text(), "yyyyyyyyyy");
    }
}
