//! A driver command in either of its forms: a line sent over the instrument's link
//! (`start_burst = "range go n={frames}"`), or a program run once per command
//! (`start_burst = { run = ["tool", "--frames", "{frames}"] }`) whose stdout lines are the
//! replies.
//!
//! A program's arguments are templates filled one by one: a parameter's value stays inside the
//! argument it was written in and is never split, quoted or read by a shell. The program itself
//! is fixed when the driver loads; a relative path with a `/` in it is taken from the driver
//! file's folder, so a driver may ship its helper beside it.

use super::template::{ParamKind, Template, Value};
use super::transport::command_line;
use std::collections::BTreeMap;
use std::path::Path;

/// One command of a driver file.
#[derive(Debug, Clone, PartialEq)]
pub enum Command {
    /// A line sent over the link.
    Line(Template),
    /// A program run for each use.
    Run(RunCommand),
}

/// A program and its argument templates.
#[derive(Debug, Clone, PartialEq)]
pub struct RunCommand {
    program: String,
    args: Vec<Template>,
}

impl RunCommand {
    /// Parses `words` (program first), allowing only the parameters in `params` in the
    /// arguments. A relative program path containing `/` is resolved against `base_dir`.
    pub fn parse(
        words: &[String],
        params: &[(&str, ParamKind)],
        base_dir: Option<&Path>,
    ) -> Result<RunCommand, String> {
        let Some((program, args)) = words.split_first() else {
            return Err("`run` names no program".into());
        };
        if program.trim().is_empty() {
            return Err("`run`'s program is empty".into());
        }
        if program.contains('{') || program.contains('}') {
            return Err(format!(
                "`{program}`: the program is fixed; parameters go in its arguments"
            ));
        }
        let program = match base_dir {
            Some(dir) if program.contains('/') && Path::new(program).is_relative() => {
                dir.join(program).display().to_string()
            }
            _ => program.clone(),
        };
        let args = args
            .iter()
            .enumerate()
            .map(|(i, a)| {
                Template::parse_word(a, params).map_err(|e| format!("argument {}: {e}", i + 1))
            })
            .collect::<Result<Vec<_>, _>>()?;
        Ok(RunCommand { program, args })
    }

    /// The program and its filled arguments, one item each.
    pub fn argv(&self, values: &BTreeMap<&str, Value>) -> Vec<String> {
        std::iter::once(self.program.clone())
            .chain(self.args.iter().map(|a| a.render(values)))
            .collect()
    }
}

impl Command {
    /// The command filled with `values`: the line to send, or the program's words.
    pub fn fill(&self, values: &BTreeMap<&str, Value>) -> Filled {
        match self {
            Command::Line(t) => Filled::Line(t.render(values)),
            Command::Run(r) => Filled::Run(r.argv(values)),
        }
    }
}

/// A command with its parameters filled in.
#[derive(Debug, Clone, PartialEq)]
pub enum Filled {
    /// The line to send.
    Line(String),
    /// The program and its arguments.
    Run(Vec<String>),
}

/// How messages show the command: the line, or `run` and the program's words.
impl std::fmt::Display for Filled {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Filled::Line(line) => f.write_str(line),
            Filled::Run(words) => write!(f, "run {}", command_line::join(words)),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const BURST: &[(&str, ParamKind)] = &[
        ("frames", ParamKind::Integer),
        ("bw_mhz", ParamKind::Integer),
    ];

    fn words(w: &[&str]) -> Vec<String> {
        w.iter().map(|s| s.to_string()).collect()
    }

    #[test]
    fn parameters_fill_whole_arguments_and_are_never_split() {
        let r = RunCommand::parse(
            &words(&["tool", "--frames", "{frames}", "--bw={bw_mhz}", "", "a b;c"]),
            BURST,
            None,
        )
        .expect("parse");
        let values = BTreeMap::from([
            ("frames", Value::Integer(16)),
            ("bw_mhz", Value::Integer(80)),
        ]);
        assert_eq!(
            r.argv(&values),
            words(&["tool", "--frames", "16", "--bw=80", "", "a b;c"])
        );
        assert_eq!(
            Command::Run(r).fill(&values).to_string(),
            "run tool --frames 16 --bw=80 '' 'a b;c'"
        );
    }

    #[test]
    fn a_relative_program_comes_from_the_drivers_folder_and_a_bare_one_from_path() {
        let dir = Path::new("/opt/drivers");
        let at = |p: &str| {
            RunCommand::parse(&words(&[p]), BURST, Some(dir))
                .expect("parse")
                .program
        };
        assert_eq!(at("./tools/burst.sh"), "/opt/drivers/./tools/burst.sh");
        assert_eq!(at("/usr/bin/tool"), "/usr/bin/tool");
        assert_eq!(at("tool"), "tool");
    }

    #[test]
    fn refuses_no_program_a_templated_program_and_unknown_parameters() {
        for (w, want) in [
            (vec![], "names no program"),
            (vec![" "], "program is empty"),
            (vec!["{frames}"], "the program is fixed"),
            (
                vec!["tool", "{center}"],
                "argument 1: `{center}`: unknown parameter",
            ),
        ] {
            let e = RunCommand::parse(&words(&w), BURST, None).expect_err(want);
            assert!(e.contains(want), "{w:?}: {e}");
        }
    }
}
