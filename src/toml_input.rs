//! Reading taucal's own TOML input files (recipes, benches, driver files): one parse for all of
//! them that refuses a number no key can mean.
//!
//! TOML allows `nan` and `inf`. No key of ours has a meaning for either, and a NaN compares
//! false with everything, so a `max_input_dbm = nan` would silently turn a receiver-protection
//! comparison off. Refusing them here, before any key is read, keeps every later check honest;
//! the checks that protect receivers still treat any non-finite value as unsafe on their own.

use crate::diagnostic::{self, Diagnostic, SourceFile};
use serde::de::DeserializeOwned;
use toml::de::{DeTable, DeValue};

/// Parses `source` into `T`, refusing any non-finite number first, at its line and column.
pub fn parse<T: DeserializeOwned>(source: &SourceFile) -> Result<T, Diagnostic> {
    // A syntax error is reported by the typed parse below, with its own message.
    if let Ok(doc) = DeTable::parse(&source.text) {
        let mut path = Vec::new();
        if let Some((key, span)) = non_finite_in_table(doc.get_ref(), &mut path) {
            let number = &source.text[span.clone()];
            return Err(Diagnostic::at(
                source,
                Some(span),
                format!("`{key}` is `{number}`, not a finite number"),
            )
            .with_hint(
                "give a finite number: no key takes nan or inf (receiver protection and every \
                 computation need real values)",
            ));
        }
    }
    toml::from_str(&source.text).map_err(|e| diagnostic::from_toml(source, &e))
}

type Found = (String, std::ops::Range<usize>);

fn non_finite_in_table(table: &DeTable<'_>, path: &mut Vec<String>) -> Option<Found> {
    for (key, value) in table.iter() {
        path.push(key.get_ref().to_string());
        let found = non_finite_in(value, path);
        path.pop();
        if found.is_some() {
            return found;
        }
    }
    None
}

fn non_finite_in(value: &toml::Spanned<DeValue<'_>>, path: &mut Vec<String>) -> Option<Found> {
    match value.get_ref() {
        DeValue::Float(f) => {
            let finite = f.as_str().parse::<f64>().is_ok_and(f64::is_finite);
            (!finite).then(|| (path.join("."), value.span()))
        }
        DeValue::Table(t) => non_finite_in_table(t, path),
        DeValue::Array(items) => {
            for (i, item) in items.iter().enumerate() {
                path.push(i.to_string());
                let found = non_finite_in(item, path);
                path.pop();
                if found.is_some() {
                    return found;
                }
            }
            None
        }
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn refusal(text: &str) -> Diagnostic {
        parse::<toml::Table>(&SourceFile::new("t.toml", text)).expect_err("refused")
    }

    #[test]
    fn every_spelling_of_nan_and_infinity_is_refused_where_it_stands() {
        // TOML 1.0 (toml.io, "Float"): `inf`, `+inf`, `-inf`, `nan`, `+nan`, `-nan`.
        for word in ["nan", "+nan", "-nan", "inf", "+inf", "-inf"] {
            let text = format!("[dut]\ntx_power_dbm = 15.0\nmax_input_dbm = {word}\n");
            let d = refusal(&text);
            assert!(d.message.contains("`dut.max_input_dbm`"), "{}", d.message);
            assert!(d.message.contains(word), "{}", d.message);
            let span = d.span.expect("located");
            assert_eq!(&text[span], word);
        }
    }

    #[test]
    fn non_finite_numbers_are_found_in_arrays_and_arrays_of_tables() {
        let d = refusal("[[stage]]\nname = \"a\"\n[[stage]]\natten_db = [20.0, nan, 40.0]\n");
        assert!(d.message.contains("`stage.1.atten_db.1`"), "{}", d.message);
        let d = refusal("sweep = { over = \"usable\", step = inf }\n");
        assert!(d.message.contains("`sweep.step`"), "{}", d.message);
    }

    #[test]
    fn finite_files_parse_as_before_and_syntax_errors_keep_their_message() {
        let t: toml::Table = parse(&SourceFile::new(
            "t.toml",
            "a = 1e300\nb = -0.0\nc = \"nan\"\n",
        ))
        .expect("ok");
        assert_eq!(t["a"].as_float(), Some(1e300));
        let d = parse::<toml::Table>(&SourceFile::new("t.toml", "a = = 1\n")).expect_err("bad");
        assert!(!d.message.contains("finite"), "{}", d.message);
    }
}
