//! Property-based fuzzing of every parser that reads user files: random edits of valid files
//! (byte flips, deletions, insertions of TOML/CSV punctuation, truncation) must end in `Ok` or a
//! located error, never a panic; the error's rendering must name the file. Case counts are the
//! figures quoted in the README.

use proptest::prelude::*;
use std::path::Path;
use taucal::bench::Bench;
use taucal::diagnostic::SourceFile;

const CASES: u32 = 4000;

/// An edit of a text: replace, delete or insert at a position, or cut the text short.
fn mutate(text: &str, edits: &[(u8, usize, u8)]) -> String {
    const PUNCT: &[u8] = b"[]{}=\"',.#\n-0123456789$ ";
    let mut b: Vec<u8> = text.as_bytes().to_vec();
    for &(kind, pos, ch) in edits {
        if b.is_empty() {
            break;
        }
        let at = pos % b.len();
        let c = PUNCT[ch as usize % PUNCT.len()];
        match kind % 4 {
            0 => b[at] = c,
            1 => {
                b.remove(at);
            }
            2 => b.insert(at, c),
            _ => b.truncate(at),
        }
    }
    String::from_utf8_lossy(&b).into_owned()
}

fn read(rel: &str) -> String {
    std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)).expect(rel)
}

fn edits() -> impl Strategy<Value = Vec<(u8, usize, u8)>> {
    proptest::collection::vec((any::<u8>(), any::<usize>(), any::<u8>()), 1..6)
}

proptest! {
    #![proptest_config(ProptestConfig { cases: CASES, failure_persistence: None, ..ProptestConfig::default() })]

    #[test]
    fn recipe_parser_never_panics(e in edits()) {
        let bench = Bench::built_in().expect("demo bench");
        let text = mutate(&read("recipes/rx-gain-sweep.toml"), &e);
        if let Err(d) = taucal::recipe::parse(SourceFile::new("r.toml", text), &[], &bench, Path::new(".")) {
            prop_assert!(d.to_string().starts_with("taucal: "));
        }
    }

    #[test]
    fn bench_parser_never_panics(e in edits()) {
        let text = mutate(&read("recipes/benches/overnight-soak.toml"), &e);
        if let Err(d) = Bench::parse(SourceFile::new("b.toml", text)) {
            prop_assert!(d.to_string().contains("b.toml"));
        }
    }

    #[test]
    fn driver_file_parser_never_panics(e in edits(), chamber in any::<bool>()) {
        let file = if chamber { "drivers/tillowby-coldhearth60.toml" } else { "drivers/wren6-console.toml" };
        let text = mutate(&read(file), &e);
        if let Err(d) = taucal::instrument::driver_file::DriverFile::parse("d", SourceFile::new("d.toml", text)) {
            prop_assert!(d.to_string().contains("d.toml"), "{}", d);
        }
    }

    #[test]
    fn exchanges_reader_never_panics(e in edits()) {
        let header = taucal::data::EXCHANGES_HEADER.join(",");
        let text = mutate(&format!("{header}\nsweep,0,0,0,40,5180,80,1,2,3,4,0,-40.5,0,25.0,ok\nsweep,0,0,1,40,5180,80,5,6,7,9,1,,0,,lost\n"), &e);
        let errors: Vec<String> = match taucal::data::csv_io::read_from(text.as_bytes(), "e.csv".into()) {
            Ok(rows) => rows.filter_map(Result::err).map(|e| e.to_string()).collect(),
            Err(e) => vec![e.to_string()],
        };
        for err in errors {
            prop_assert!(err.starts_with("e.csv"), "{}", err);
        }
    }

    #[test]
    fn ranges_reader_never_panics(e in edits()) {
        let text = mutate("distance_mm,true_m,status\n1005,1.0,ok\n2011,2.0,ok\nnan,3.0,fail\n", &e);
        let _ = taucal::fit::ota::read_ranges(&text, "distance_mm", "true_m");
    }

    #[test]
    fn pairs_reader_never_panics(e in edits()) {
        let text = mutate("unit_a,unit_b,sum_ps,se_ps\nA,B,5000,10\nB,C,5200,10\nA,C,5100,12\n", &e);
        let _ = taucal::fit::pairs::read_pairs(&text);
    }
}
