//! Progress on stderr. Computation never prints; it reports through a [`Progress`] handed in
//! by the CLI. On a terminal each step is a bar with the time left; when stderr is a file or a
//! pipe (batch jobs, logs) each step that runs over a second writes a few plain lines instead:
//! at each quarter of its work (with the time left) and when done. `--quiet` silences both.
//! A reporter can carry a prefix ([`Progress::with_prefix`]), e.g. the capture a `report` on two
//! captures is working on, which every line and bar of its steps starts with.
//! `VOXSTRATA_PROGRESS_AFTER_S` (seconds, default 1) sets how long a step runs before plain
//! lines are printed.

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Mutex;
use std::time::{Duration, Instant};

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// In plain-line mode, steps shorter than this print nothing (unless
/// `VOXSTRATA_PROGRESS_AFTER_S` says otherwise).
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
    /// Put before every line and bar message, followed by `: ` (None: nothing).
    prefix: Option<String>,
    /// Seconds a step runs before plain lines are printed.
    quiet_s: f64,
}

/// Plain-line state of one step.
#[derive(Debug)]
struct LineStep {
    prefix: Option<String>,
    quiet_s: f64,
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
    /// The reporter's prefix, for the bar's messages.
    prefix: Option<String>,
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
        let quiet_s = std::env::var("VOXSTRATA_PROGRESS_AFTER_S")
            .ok()
            .and_then(|v| v.trim().parse::<f64>().ok())
            .filter(|v| v.is_finite() && *v >= 0.0)
            .unwrap_or(QUIET_SECONDS);
        Progress {
            mode,
            prefix: None,
            quiet_s,
        }
    }

    /// A reporter that never shows anything (tests, library use).
    pub fn hidden() -> Self {
        Progress {
            mode: Mode::Hidden,
            prefix: None,
            quiet_s: QUIET_SECONDS,
        }
    }

    /// The same reporter with `prefix` (e.g. a capture's name) before every line and bar
    /// message of its steps; a prefix already there is kept in front.
    pub fn with_prefix(&self, prefix: &str) -> Self {
        let prefix = match &self.prefix {
            Some(p) => format!("{p}: {prefix}"),
            None => prefix.to_string(),
        };
        Progress {
            prefix: Some(prefix),
            ..self.clone()
        }
    }

    /// Print a note on stderr now (`voxstrata: note: …`), unless the reporter is hidden.
    pub fn note(&self, m: &str) {
        if !matches!(self.mode, Mode::Hidden) {
            eprintln!("voxstrata: note: {}", self.prefixed(m));
        }
    }

    /// `m` with the prefix in front.
    fn prefixed(&self, m: &str) -> String {
        match &self.prefix {
            Some(p) => format!("{p}: {m}"),
            None => m.to_string(),
        }
    }

    /// Start a step of `total` units named `what`; it shows the time left.
    pub fn step(&self, what: &str, total: u64) -> Step {
        match self.mode {
            Mode::Hidden => Step {
                bar: None,
                prefix: None,
                lines: None,
            },
            Mode::Lines => Step {
                bar: None,
                prefix: None,
                lines: Some(LineStep {
                    prefix: self.prefix.clone(),
                    quiet_s: self.quiet_s,
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
                bar.set_message(self.prefixed(what));
                bar.enable_steady_tick(Duration::from_millis(200));
                Step {
                    bar: Some(bar),
                    prefix: self.prefix.clone(),
                    lines: None,
                }
            }
        }
    }
}

impl LineStep {
    /// The step's name with its message, after the prefix.
    fn label(&self) -> String {
        let m = self.message.lock().map(|m| m.clone()).unwrap_or_default();
        let l = if m.is_empty() || m == self.what {
            self.what.clone()
        } else if m.starts_with(&self.what) {
            m
        } else {
            format!("{} ({m})", self.what)
        };
        self.with_prefix(&l)
    }

    fn with_prefix(&self, l: &str) -> String {
        match &self.prefix {
            Some(p) => format!("{p}: {l}"),
            None => l.to_string(),
        }
    }

    /// The line printed at a quarter of the work.
    fn quarter_line(&self, frac: f64, secs: f64) -> String {
        let left = secs * (1.0 - frac) / frac.max(1e-9);
        format!(
            "voxstrata: {}: {:.0}% after {secs:.1} s, about {left:.0} s left",
            self.label(),
            frac * 100.0
        )
    }

    /// The line printed when the step is done.
    fn done_line(&self, secs: f64) -> String {
        format!(
            "voxstrata: {}: done in {secs:.1} s",
            self.with_prefix(&self.what)
        )
    }

    fn advance(&self, n: u64) {
        let pos = self.pos.fetch_add(n, Ordering::Relaxed) + n;
        if self.total == 0 {
            return;
        }
        let q = (pos.min(self.total) * 4 / self.total).min(3);
        let secs = self.start.elapsed().as_secs_f64();
        // quick steps stay silent until they are done
        if secs < self.quiet_s {
            return;
        }
        let seen = self.quarters.fetch_max(q, Ordering::Relaxed);
        if q > seen {
            let frac = pos.min(self.total) as f64 / self.total as f64;
            eprintln!("{}", self.quarter_line(frac, secs));
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
            b.set_message(match &self.prefix {
                Some(p) => format!("{p}: {m}"),
                None => m.to_string(),
            });
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
            if secs >= l.quiet_s {
                eprintln!("{}", l.done_line(secs));
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lines_reporter() -> Progress {
        Progress {
            mode: Mode::Lines,
            prefix: None,
            quiet_s: QUIET_SECONDS,
        }
    }

    #[test]
    fn a_prefix_starts_every_line_of_a_step() {
        let p = lines_reporter().with_prefix("demo-final");
        let step = p.step("map", 4);
        step.message("layer 2");
        let l = step.lines.as_ref().unwrap();
        assert_eq!(
            l.quarter_line(0.5, 2.0),
            "voxstrata: demo-final: map (layer 2): 50% after 2.0 s, about 2 s left"
        );
        assert_eq!(
            l.done_line(3.0),
            "voxstrata: demo-final: map: done in 3.0 s"
        );
        // prefixes nest, outer first; without one the line is as before
        let nested = p.with_prefix("unit 3").step("probe", 1);
        let n = nested.lines.as_ref().unwrap();
        assert_eq!(
            n.done_line(1.0),
            "voxstrata: demo-final: unit 3: probe: done in 1.0 s"
        );
        let plain = lines_reporter().step("probe", 1);
        let pl = plain.lines.as_ref().unwrap();
        assert_eq!(pl.done_line(1.0), "voxstrata: probe: done in 1.0 s");
    }
}
