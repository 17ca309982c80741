//! The `septum` command: parses arguments, calls the library, maps the
//! outcome to an exit code.

use std::process::ExitCode;

mod cli;

fn main() -> ExitCode {
    // Behave like other command-line tools when the reader of our output
    // goes away (`septum … | head`): end quietly instead of panicking.
    #[cfg(unix)]
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
    cli::main()
}
