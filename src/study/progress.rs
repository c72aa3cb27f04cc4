//! Progress bars on standard error (hidden when progress is off).

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// A bar of `len` steps with a message, in the study's common layout.
pub(super) fn bar(enabled: bool, len: u64, message: &'static str) -> ProgressBar {
    let b = bar_with_template(
        enabled,
        len,
        "{msg:<34} [{bar:30}] {pos}/{len} ({elapsed}, eta {eta})",
    );
    b.set_message(message);
    b
}

/// A progress bar on standard error (hidden when not `enabled`).
pub(super) fn bar_with_template(enabled: bool, len: u64, template: &str) -> ProgressBar {
    if !enabled {
        return ProgressBar::hidden();
    }
    let b = ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::stderr());
    b.set_style(
        ProgressStyle::with_template(template)
            .expect("valid template")
            .progress_chars("=> "),
    );
    b
}
