//! Progress on stderr. Computation never prints; it reports through a [`Progress`] handed in
//! by the CLI. On a terminal each step is a bar with the time left; when stderr is a file or a
//! pipe (batch jobs, logs) each step that runs over a second writes a few plain lines instead:
//! at each quarter of its work (with the time left) and when done. `--quiet` silences both.

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Mutex;
use std::time::{Duration, Instant};

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// In plain-line mode, steps shorter than this print nothing.
const QUIET_SECONDS: f64 = 1.0;

/// How progress is shown.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Mode {
    Hidden,
    Bars,
    Lines,
}

/// Progress reporter handed to long computations.
#[derive(Clone, Debug)]
pub struct Progress {
    mode: Mode,
}

/// Plain-line state of one step.
#[derive(Debug)]
struct LineStep {
    what: String,
    total: u64,
    start: Instant,
    pos: AtomicU64,
    /// Quarters of the work already reported.
    quarters: AtomicU64,
    message: Mutex<String>,
}

/// One step of work with a known number of units.
#[derive(Debug)]
pub struct Step {
    bar: Option<ProgressBar>,
    lines: Option<LineStep>,
}

impl Progress {
    /// A reporter for the command line: bars on a terminal, plain lines otherwise, nothing
    /// when `quiet`.
    pub fn new(quiet: bool) -> Self {
        use std::io::IsTerminal;
        let mode = if quiet {
            Mode::Hidden
        } else if std::io::stderr().is_terminal() {
            Mode::Bars
        } else {
            Mode::Lines
        };
        Progress { mode }
    }

    /// A reporter that never shows anything (tests, library use).
    pub fn hidden() -> Self {
        Progress { mode: Mode::Hidden }
    }

    /// Start a step of `total` units named `what`; it shows the time left.
    pub fn step(&self, what: &str, total: u64) -> Step {
        match self.mode {
            Mode::Hidden => Step {
                bar: None,
                lines: None,
            },
            Mode::Lines => Step {
                bar: None,
                lines: Some(LineStep {
                    what: what.to_string(),
                    total,
                    start: Instant::now(),
                    pos: AtomicU64::new(0),
                    quarters: AtomicU64::new(0),
                    message: Mutex::new(String::new()),
                }),
            },
            Mode::Bars => {
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
                Step {
                    bar: Some(bar),
                    lines: None,
                }
            }
        }
    }
}

impl LineStep {
    fn label(&self) -> String {
        let m = self.message.lock().map(|m| m.clone()).unwrap_or_default();
        if m.is_empty() || m == self.what {
            self.what.clone()
        } else if m.starts_with(&self.what) {
            m
        } else {
            format!("{} ({m})", self.what)
        }
    }

    fn advance(&self, n: u64) {
        let pos = self.pos.fetch_add(n, Ordering::Relaxed) + n;
        if self.total == 0 {
            return;
        }
        let q = (pos.min(self.total) * 4 / self.total).min(3);
        let secs = self.start.elapsed().as_secs_f64();
        // quick steps stay silent until they are done
        if secs < QUIET_SECONDS {
            return;
        }
        let seen = self.quarters.fetch_max(q, Ordering::Relaxed);
        if q > seen {
            let frac = pos.min(self.total) as f64 / self.total as f64;
            let left = secs * (1.0 - frac) / frac.max(1e-9);
            eprintln!(
                "voxstrata: {}: {:.0}% after {secs:.1} s, about {left:.0} s left",
                self.label(),
                frac * 100.0
            );
        }
    }
}

impl Step {
    /// Advance by `n` units.
    pub fn inc(&self, n: u64) {
        if let Some(b) = &self.bar {
            b.inc(n);
        }
        if let Some(l) = &self.lines {
            l.advance(n);
        }
    }

    /// Change the message shown beside the bar.
    pub fn message(&self, m: &str) {
        if let Some(b) = &self.bar {
            b.set_message(m.to_string());
        }
        if let Some(l) = &self.lines {
            if let Ok(mut g) = l.message.lock() {
                *g = m.to_string();
            }
        }
    }
}

impl Drop for Step {
    fn drop(&mut self) {
        if let Some(b) = &self.bar {
            b.finish_and_clear();
        }
        if let Some(l) = &self.lines {
            let secs = l.start.elapsed().as_secs_f64();
            if secs >= QUIET_SECONDS {
                eprintln!("voxstrata: {}: done in {secs:.1} s", l.what);
            }
        }
    }
}
