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
    keep_freed_memory();
    cli::main()
}

/// The analysis frees and allocates buffers of a few hundred kilobytes to
/// a few megabytes for every capture. glibc's defaults hand such blocks
/// back to the kernel at once (large ones as separate mappings, the top of
/// a heap by trimming), so each capture faults in and zeroes its pages
/// afresh: about a sixth of the analysis time on a 32-channel run. Keep
/// freed memory in the process for reuse instead (peak memory grows by
/// about a fifth on that run).
fn keep_freed_memory() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    // SAFETY: mallopt only changes allocator thresholds, before any thread
    // has started; a refused value leaves the default in place.
    unsafe {
        libc::mallopt(libc::M_MMAP_THRESHOLD, 32 << 20);
        libc::mallopt(libc::M_TRIM_THRESHOLD, 256 << 20);
    }
}
