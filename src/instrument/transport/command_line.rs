//! A program and its arguments written as one string, split the way a POSIX shell splits words
//! — blanks separate, single quotes keep everything literal, double quotes keep blanks and take
//! backslash escapes, a backslash outside quotes escapes the next character — but no shell ever
//! runs: there is no expansion, globbing, redirection or `;`, so text in a bench file can never
//! become a second command.
//!
//! Pure: a bench's `exec:` addresses are split (and refused) before anything starts.

/// Splits `text` into words. Refuses an unclosed quote, a trailing backslash and an empty line.
pub fn split(text: &str) -> Result<Vec<String>, String> {
    let mut words = Vec::new();
    let mut word = String::new();
    // A word exists once anything (even an empty quote) was written, so `''` is an argument.
    let mut started = false;
    let mut chars = text.chars();
    while let Some(c) = chars.next() {
        match c {
            c if c.is_whitespace() => {
                if started {
                    words.push(std::mem::take(&mut word));
                    started = false;
                }
            }
            '\'' => {
                started = true;
                loop {
                    match chars.next() {
                        Some('\'') => break,
                        Some(c) => word.push(c),
                        None => return Err("a single quote (') is not closed".into()),
                    }
                }
            }
            '"' => {
                started = true;
                loop {
                    match chars.next() {
                        Some('"') => break,
                        // Inside double quotes a backslash escapes only what POSIX lets it.
                        Some('\\') => match chars.next() {
                            Some(e @ ('"' | '\\' | '$' | '`')) => word.push(e),
                            Some('\n') => {}
                            Some(other) => {
                                word.push('\\');
                                word.push(other);
                            }
                            None => return Err("a double quote (\") is not closed".into()),
                        },
                        Some(c) => word.push(c),
                        None => return Err("a double quote (\") is not closed".into()),
                    }
                }
            }
            '\\' => {
                started = true;
                match chars.next() {
                    Some('\n') => {}
                    Some(c) => word.push(c),
                    None => return Err("a backslash at the end escapes nothing".into()),
                }
            }
            c => {
                started = true;
                word.push(c);
            }
        }
    }
    if started {
        words.push(word);
    }
    match words.first() {
        None => Err("it names no program".into()),
        Some(p) if p.is_empty() => Err("the program's name is empty".into()),
        Some(_) => Ok(words),
    }
}

/// Writes `words` back as one line that [`split`] reads as the same words: a word with
/// anything a shell would treat specially is single-quoted.
pub fn join(words: &[String]) -> String {
    words
        .iter()
        .map(|w| {
            let plain = !w.is_empty()
                && w.chars()
                    .all(|c| c.is_ascii_alphanumeric() || "-_./:=,+@%".contains(c));
            if plain {
                w.clone()
            } else {
                format!("'{}'", w.replace('\'', r"'\''"))
            }
        })
        .collect::<Vec<_>>()
        .join(" ")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn words(text: &str) -> Vec<String> {
        split(text).unwrap_or_else(|e| panic!("{text}: {e}"))
    }

    #[test]
    fn splits_like_a_posix_shell_without_running_one() {
        // Expected words are what POSIX.1-2017 XCU §2.2 (Quoting) and §2.6.5 (Field
        // Splitting) give for each line; checked by hand against `printf '[%s]' LINE` in sh.
        assert_eq!(words("tool --frames 16"), ["tool", "--frames", "16"]);
        assert_eq!(words("  a\t b  "), ["a", "b"]);
        assert_eq!(words("'a b' \"c d\""), ["a b", "c d"]);
        assert_eq!(words(r#"a\ b c\"d"#), ["a b", "c\"d"]);
        assert_eq!(words(r#""x\"y\\z\n""#), ["x\"y\\z\\n"]);
        assert_eq!(words(r"'it'\''s'"), ["it's"]);
        assert_eq!(words("p '' x"), ["p", "", "x"]);
        assert_eq!(words("p ab'cd'\"ef\""), ["p", "abcdef"]);
        // Nothing a shell would interpret is interpreted.
        assert_eq!(
            words("p $HOME; rm -rf * | tee >out"),
            ["p", "$HOME;", "rm", "-rf", "*", "|", "tee", ">out"]
        );
    }

    #[test]
    fn refuses_what_a_shell_would_refuse_and_an_empty_program() {
        for (text, want) in [
            ("tool 'open", "single quote"),
            ("tool \"open", "double quote"),
            ("tool \"esc\\", "double quote"),
            ("tool \\", "backslash"),
            ("", "no program"),
            ("   ", "no program"),
            ("'' arg", "empty"),
        ] {
            let e = split(text).expect_err(text);
            assert!(e.contains(want), "{text}: {e}");
        }
    }

    proptest::proptest! {
        #[test]
        fn any_words_survive_a_join_and_a_split(
            words in proptest::collection::vec("\\PC*", 1..6),
            program in "\\PC+",
        ) {
            // Any text (unicode, quotes, blanks, backslashes) as arguments, empty ones too, and
            // as the program's name, which may not be empty.
            let mut line = vec![program];
            line.extend(words);
            proptest::prop_assert_eq!(split(&join(&line)), Ok(line));
        }

        #[test]
        fn any_text_splits_or_is_refused_without_panicking(text in "\\PC*") {
            if let Ok(words) = split(&text) {
                proptest::prop_assert!(!words[0].is_empty());
            }
        }
    }

    #[test]
    fn joined_words_split_back_to_themselves() {
        for line in [
            vec!["taucal", "sim", "serve"],
            vec!["/opt/my tools/x", "it's", "", "a\"b", "$x", "tab\there"],
        ] {
            let line: Vec<String> = line.into_iter().map(String::from).collect();
            assert_eq!(split(&join(&line)), Ok(line.clone()), "{}", join(&line));
        }
    }
}
