//! Progress bars on standard error (hidden when it is not a terminal).

use indicatif::{ProgressBar, ProgressStyle};

/// A bar counting `len` items of `what`.
pub fn bar(len: u64, what: &str) -> ProgressBar {
    let pb = ProgressBar::new(len);
    pb.set_style(
        ProgressStyle::with_template("{msg:>10} [{bar:32}] {pos}/{len} {elapsed}/{eta} left")
            .expect("valid template")
            .progress_chars("=> "),
    );
    pb.set_message(what.to_string());
    pb
}
