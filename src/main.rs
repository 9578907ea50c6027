//! The `taucal` binary: everything lives in the library; this maps its outcome to an exit code.

fn main() -> std::process::ExitCode {
    taucal::cli::main().into()
}
