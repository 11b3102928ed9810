//! Progress on stderr. Computation never prints; it reports through a [`Progress`] handed in
//! by the CLI, which shows bars only when stderr is a terminal and `--quiet` is off.

use std::time::Duration;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// Progress reporter handed to long computations.
#[derive(Clone, Debug)]
pub struct Progress {
    visible: bool,
}

/// One step of work with a known number of units.
#[derive(Debug)]
pub struct Step {
    bar: Option<ProgressBar>,
}

impl Progress {
    /// A reporter that shows bars on stderr if `quiet` is false and stderr is a terminal.
    pub fn new(quiet: bool) -> Self {
        use std::io::IsTerminal;
        Progress {
            visible: !quiet && std::io::stderr().is_terminal(),
        }
    }

    /// A reporter that never shows anything (tests, library use).
    pub fn hidden() -> Self {
        Progress { visible: false }
    }

    /// Start a step of `total` units named `what`; the bar shows time left.
    pub fn step(&self, what: &str, total: u64) -> Step {
        if !self.visible {
            return Step { bar: None };
        }
        let bar = ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::stderr());
        bar.set_style(
            ProgressStyle::with_template(
                "{msg:>24} [{bar:30}] {pos}/{len} {elapsed_precise} left {eta}",
            )
            .unwrap_or_else(|_| ProgressStyle::default_bar())
            .progress_chars("=> "),
        );
        bar.set_message(what.to_string());
        bar.enable_steady_tick(Duration::from_millis(200));
        Step { bar: Some(bar) }
    }
}

impl Step {
    /// Advance by `n` units.
    pub fn inc(&self, n: u64) {
        if let Some(b) = &self.bar {
            b.inc(n);
        }
    }

    /// Change the message shown beside the bar.
    pub fn message(&self, m: &str) {
        if let Some(b) = &self.bar {
            b.set_message(m.to_string());
        }
    }
}

impl Drop for Step {
    fn drop(&mut self) {
        if let Some(b) = &self.bar {
            b.finish_and_clear();
        }
    }
}
