//! `taucal completions`: a completion script for the shell named, generated from the same
//! command definition the parser uses, so it never falls behind.

use super::args::{Cli, CompletionsArgs};
use super::Exit;
use clap::CommandFactory;

/// Prints the script on stdout.
pub fn run(args: CompletionsArgs) -> Exit {
    let mut cmd = Cli::command();
    clap_complete::generate(args.shell, &mut cmd, "taucal", &mut std::io::stdout());
    Exit::Ok
}
