//! Touchstone text into a network: the option line (`# GHz S MA R 50`: frequency unit,
//! parameter, format — RI, MA or DB — and reference resistance), version 2.0's keywords, and
//! the data in either two-port order. Only S-parameters are read (a path's transmission is
//! what taucal needs); Y, Z, H and G files are refused, as are noise data's lines, which end
//! the network data.

use super::Complex;
use thiserror::Error;

/// A network read from a file: its frequencies and, per frequency, its N×N S-matrix.
#[derive(Debug, Clone, PartialEq)]
pub struct Network {
    /// Ports.
    pub ports: usize,
    /// Frequencies, Hz, strictly increasing.
    pub freq_hz: Vec<f64>,
    /// `s[k][i * ports + j]` is S(i+1)(j+1) at `freq_hz[k]`.
    pub s: Vec<Vec<Complex>>,
}

impl Network {
    /// S(to)(from) at every frequency (1-based ports, as written: S21 is `sij(2, 1)`).
    pub fn sij(&self, to: usize, from: usize) -> Vec<Complex> {
        let at = (to - 1) * self.ports + (from - 1);
        self.s.iter().map(|m| m[at]).collect()
    }
}

/// Why a file could not be read, with its line.
#[derive(Debug, Clone, PartialEq, Error)]
#[error("line {line}: {message}")]
pub struct TouchstoneError {
    /// 1-based line.
    pub line: usize,
    /// What is wrong, and what would be right.
    pub message: String,
}

fn err(line: usize, message: impl Into<String>) -> TouchstoneError {
    TouchstoneError {
        line,
        message: message.into(),
    }
}

#[derive(Clone, Copy, PartialEq)]
enum Format {
    Ri,
    Ma,
    Db,
}

/// Reads a Touchstone file's text. `ports_from_name` is N of a `.sNp` file name (version 1.x
/// says its port count only there); version 2.0's `[Number of Ports]` takes precedence.
pub fn parse(text: &str, ports_from_name: Option<usize>) -> Result<Network, TouchstoneError> {
    let mut unit_hz = 1e9;
    let mut format = Format::Ma;
    let mut option_seen = false;
    let mut version2 = false;
    let mut ports = ports_from_name;
    // Version 1.x and 2.0's `21_12` write a two-port's S21 before S12.
    let mut order_21_12 = true;
    let mut order_given = false;
    let mut in_data = true;
    let mut numbers: Vec<(f64, usize)> = Vec::new();
    for (i, raw) in text.lines().enumerate() {
        let line_no = i + 1;
        let line = raw.split('!').next().unwrap_or("").trim();
        if line.is_empty() {
            continue;
        }
        if let Some(options) = line.strip_prefix('#') {
            if option_seen {
                continue; // later option lines are ignored, as the format says
            }
            option_seen = true;
            for word in options.split_whitespace().map(str::to_ascii_uppercase) {
                match word.as_str() {
                    "HZ" => unit_hz = 1.0,
                    "KHZ" => unit_hz = 1e3,
                    "MHZ" => unit_hz = 1e6,
                    "GHZ" => unit_hz = 1e9,
                    "S" => {}
                    "Y" | "Z" | "H" | "G" => {
                        return Err(err(
                            line_no,
                            format!("holds {word}-parameters; taucal reads S-parameters"),
                        ))
                    }
                    "RI" => format = Format::Ri,
                    "MA" => format = Format::Ma,
                    "DB" => format = Format::Db,
                    "R" => {}
                    w if w.parse::<f64>().is_ok() => {}
                    other => {
                        return Err(err(
                            line_no,
                            format!("option `{other}` is not a frequency unit (HZ, KHZ, MHZ, GHZ), parameter (S) or format (RI, MA, DB)"),
                        ))
                    }
                }
            }
            continue;
        }
        if line.starts_with('[') {
            let close = line
                .find(']')
                .ok_or_else(|| err(line_no, "a keyword's `]` is missing"))?;
            let key = line[1..close].trim().to_ascii_lowercase();
            let value = line[close + 1..].trim();
            match key.as_str() {
                "version" => version2 = true,
                "number of ports" => {
                    ports = Some(value.parse().map_err(|_| {
                        err(
                            line_no,
                            format!("[Number of Ports] `{value}` is not a whole number"),
                        )
                    })?)
                }
                "two-port data order" => {
                    order_given = true;
                    order_21_12 = match value {
                        "21_12" => true,
                        "12_21" => false,
                        _ => {
                            return Err(err(
                                line_no,
                                format!("[Two-Port Data Order] `{value}` is not 12_21 or 21_12"),
                            ))
                        }
                    }
                }
                "network data" => in_data = true,
                "noise data" | "end" => in_data = false,
                "matrix format" if !value.eq_ignore_ascii_case("full") => {
                    return Err(err(
                        line_no,
                        format!("[Matrix Format] {value}: taucal reads full matrices"),
                    ))
                }
                _ => {}
            }
            continue;
        }
        if !in_data {
            continue;
        }
        for word in line.split_whitespace() {
            let v: f64 = word
                .parse()
                .map_err(|_| err(line_no, format!("`{word}` is not a number")))?;
            if !v.is_finite() {
                return Err(err(line_no, format!("`{word}` is not a finite number")));
            }
            numbers.push((v, line_no));
        }
    }
    let Some(n) = ports.filter(|n| *n >= 1) else {
        return Err(err(
            1,
            "the number of ports is unknown: name the file .s1p, .s2p, … or give [Number of Ports]",
        ));
    };
    if version2 && n == 2 && !order_given {
        return Err(err(
            1,
            "a version 2.0 two-port file needs [Two-Port Data Order]",
        ));
    }
    let per = 1 + 2 * n * n;
    let mut net = Network {
        ports: n,
        freq_hz: Vec::new(),
        s: Vec::new(),
    };
    for chunk in numbers.chunks(per) {
        let line_no = chunk[0].1;
        let f = chunk[0].0 * unit_hz;
        let falls_back = net.freq_hz.last().is_some_and(|last| f <= *last);
        // Version 1.x two-port noise data follow the network data: the frequency falls back,
        // on a line of five numbers (frequency, minimum noise figure, Γopt's magnitude and
        // angle, Rn). A network row that falls back is a file out of order.
        let noise_row = || numbers.iter().filter(|(_, l)| *l == line_no).count() == 5;
        if falls_back && n == 2 && !version2 && noise_row() {
            break;
        }
        if chunk.len() < per {
            return Err(err(
                line_no,
                format!(
                    "a row of a {n}-port file has a frequency and {} numbers; this one ends after {}",
                    per - 1,
                    chunk.len() - 1
                ),
            ));
        }
        if falls_back {
            return Err(err(line_no, "frequencies must increase from row to row"));
        }
        let mut m: Vec<Complex> = chunk[1..]
            .chunks(2)
            .map(|p| to_complex(format, p[0].0, p[1].0))
            .collect();
        if n == 2 && order_21_12 {
            m.swap(1, 2);
        }
        net.freq_hz.push(f);
        net.s.push(m);
    }
    if net.freq_hz.len() < 2 {
        return Err(err(
            1,
            "fewer than two frequencies: no group delay can be taken",
        ));
    }
    Ok(net)
}

fn to_complex(format: Format, a: f64, b: f64) -> Complex {
    let polar = |mag: f64, deg: f64| {
        let r = deg.to_radians();
        Complex {
            re: mag * r.cos(),
            im: mag * r.sin(),
        }
    };
    match format {
        Format::Ri => Complex { re: a, im: b },
        Format::Ma => polar(a, b),
        Format::Db => polar(10f64.powf(a / 20.0), b),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_version_1_two_port_in_each_format_reads_the_same() {
        // One frequency, S11 = 0.1∠0°, S21 = 0.5∠−90°, S12 = 0.5∠−90°, S22 = 0.2∠180°.
        let ri =
            "# MHz S RI R 50\n100 0.1 0 0 -0.5 0 -0.5 -0.2 0\n200 0.1 0 0 -0.5 0 -0.5 -0.2 0\n";
        let ma = "! a comment\n# MHZ S MA R 50\n100 0.1 0 0.5 -90 0.5 -90 0.2 180\n200 0.1 0 0.5 -90 0.5 -90 0.2 180\n";
        let db = format!(
            "# mhz s db r 50\n100 {0} 0 {1} -90 {1} -90 {2} 180\n200 {0} 0 {1} -90 {1} -90 {2} 180\n",
            20.0 * 0.1f64.log10(),
            20.0 * 0.5f64.log10(),
            20.0 * 0.2f64.log10()
        );
        for text in [ri.to_string(), ma.to_string(), db] {
            let n = parse(&text, Some(2)).expect("reads");
            assert_eq!(n.freq_hz, [100e6, 200e6]);
            let s21 = n.sij(2, 1)[0];
            assert!(
                (s21.re).abs() < 1e-12 && (s21.im + 0.5).abs() < 1e-12,
                "{s21:?}"
            );
            let s22 = n.sij(2, 2)[0];
            assert!((s22.re + 0.2).abs() < 1e-12, "{s22:?}");
        }
    }

    #[test]
    fn version_2_keeps_its_declared_two_port_order() {
        // 12_21: S11 S12 S21 S22. S12 here is 0.3, S21 0.7.
        let text = "[Version] 2.0\n# GHz S RI R 50\n[Number of Ports] 2\n[Two-Port Data Order] 12_21\n[Number of Frequencies] 2\n[Network Data]\n1 0 0 0.3 0 0.7 0 0 0\n2 0 0 0.3 0 0.7 0 0 0\n[End]\n";
        let n = parse(text, None).expect("reads");
        assert_eq!(n.sij(2, 1)[1].re, 0.7);
        assert_eq!(n.sij(1, 2)[1].re, 0.3);
        assert_eq!(n.freq_hz, [1e9, 2e9]);
    }

    #[test]
    fn noise_data_end_a_version_1_two_port_and_bad_files_say_where() {
        let text = "# GHz S RI\n1 0 0 1 0 1 0 0 0\n2 0 0 1 0 1 0 0 0\n1 1.5 0.5 90 0.2\n";
        assert_eq!(parse(text, Some(2)).expect("reads").freq_hz.len(), 2);
        for (text, ports, says) in [
            ("# GHz Z RI\n1 0 0\n2 0 0\n", Some(1), "Z-parameters"),
            (
                "# GHz S RI\n1 0 x\n2 0 0\n",
                Some(1),
                "line 2: `x` is not a number",
            ),
            (
                "# GHz S RI\n1 0 0\n2 0 0\n",
                None,
                "number of ports is unknown",
            ),
            ("# GHz S RI\n2 0 0\n1 0 0\n", Some(1), "must increase"),
            (
                "# GHz S RI\n1 0 0 1 0 1 0 0 0\n3 0 0 1 0 1 0 0 0\n2 0 0 1 0 1 0 0 0\n",
                Some(2),
                "line 4: frequencies must increase",
            ),
            ("# GHz S RI\n1 0 0 1\n", Some(1), "ends after"),
            (
                "[Version] 2.0\n# GHz S RI\n[Number of Ports] 2\n1 0 0 1 0 1 0 0 0\n",
                None,
                "Two-Port Data Order",
            ),
        ] {
            let e = parse(text, ports).expect_err(says).to_string();
            assert!(e.contains(says), "{e}");
        }
    }
}
