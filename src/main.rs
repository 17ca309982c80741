//! The `septum` command: parses arguments, calls the library, maps the
//! outcome to an exit code.

use std::process::ExitCode;

mod cli;

fn main() -> ExitCode {
    cli::main()
}
