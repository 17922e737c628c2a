//! Progress bars for the commands that take more than a moment (long runs,
//! campaigns, loop tuning and reports): drawn on stderr, hidden when stderr
//! is not a terminal so that logs and pipes stay clean.

use std::io::IsTerminal;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// A bar of `len` steps of `what` (for example "cases" or "ticks"), on
/// stderr when it is a terminal, else hidden.
pub fn bar(len: u64, what: &str) -> ProgressBar {
    bar_on(len, what, std::io::stderr().is_terminal())
}

/// [`bar`], drawn only when `visible`.
pub fn bar_on(len: u64, what: &str, visible: bool) -> ProgressBar {
    let target = if visible {
        ProgressDrawTarget::stderr()
    } else {
        ProgressDrawTarget::hidden()
    };
    let pb = ProgressBar::with_draw_target(Some(len), target);
    pb.set_style(
        ProgressStyle::with_template(&format!(
            "{{bar:40}} {{percent:>3}} % of {{len}} {what}, {{elapsed}} (left about {{eta}})"
        ))
        .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    pb
}

/// A spinner for work of unknown length (`what` says what is going on), on
/// stderr when it is a terminal, else hidden.
pub fn spinner(what: &str) -> ProgressBar {
    let target = if std::io::stderr().is_terminal() {
        ProgressDrawTarget::stderr()
    } else {
        ProgressDrawTarget::hidden()
    };
    let pb = ProgressBar::with_draw_target(None, target);
    pb.set_style(
        ProgressStyle::with_template("{spinner} {msg} {elapsed}")
            .unwrap_or_else(|_| ProgressStyle::default_spinner()),
    );
    pb.set_message(what.to_string());
    pb.enable_steady_tick(std::time::Duration::from_millis(120));
    pb
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hidden_when_not_on_a_terminal() {
        assert!(bar_on(10, "cases", false).is_hidden());
        // Under the test harness stderr is captured, not a terminal.
        if !std::io::stderr().is_terminal() {
            assert!(bar(10, "cases").is_hidden());
        }
    }
}
