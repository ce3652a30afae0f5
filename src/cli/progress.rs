//! Progress reporting for runs: an indicatif bar when stderr is a terminal, plain lines
//! otherwise, nothing with --quiet.

use std::io::IsTerminal;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Mutex;
use std::sync::OnceLock;
use std::time::Instant;

use indicatif::{ProgressBar, ProgressStyle};

use crate::experiment::runner::Observer;

/// The time-left phrase of a progress line: no number until the estimate means something (at
/// least 2 % of the chips and 2 s of work: the first chips of a run also pay for thread start-up
/// and caches, so an early rate overstates the time left), then the chips' mean rate.
/// Thresholds: our choice.
pub fn time_left(elapsed_s: f64, done: u64, total: u64) -> String {
    if done == 0 || elapsed_s < 2.0 || done * 50 < total {
        return "estimating the time left".into();
    }
    let left = elapsed_s / done as f64 * total.saturating_sub(done) as f64;
    format!("about {left:.0} s left")
}

/// Set by Ctrl-C (SIGINT); the runner stops at the next chip and keeps every finished point.
static INTERRUPTED: AtomicBool = AtomicBool::new(false);
static HANDLER: OnceLock<bool> = OnceLock::new();

/// Install the Ctrl-C handler once per process: the first Ctrl-C asks the run to stop (the
/// finished points are kept and the command says so); a second one ends the process at once.
pub fn catch_interrupt() {
    HANDLER.get_or_init(|| {
        ctrlc::set_handler(|| {
            if INTERRUPTED.swap(true, Ordering::SeqCst) {
                std::process::exit(130);
            }
        })
        .is_ok()
    });
}

/// Has Ctrl-C been pressed?
pub fn interrupted() -> bool {
    INTERRUPTED.load(Ordering::SeqCst)
}

/// Test hook: with `HARDMAX_TEST_HOLD_AFTER_POINT=SECONDS` in the environment, the run waits
/// after each finished (saved) point until Ctrl-C arrives or SECONDS pass. It lets the
/// interrupt test signal a run that is certainly still going, with exactly one point kept.
/// Not a user option (no effect unless the variable is set).
fn hold_for_tests() {
    let Some(secs) = std::env::var("HARDMAX_TEST_HOLD_AFTER_POINT")
        .ok()
        .and_then(|v| v.parse::<f64>().ok())
        .filter(|s| s.is_finite() && *s > 0.0)
    else {
        return;
    };
    let t0 = Instant::now();
    while !interrupted() && t0.elapsed().as_secs_f64() < secs {
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
}

/// Reports a run's progress on stderr.
pub struct Progress {
    bar: Option<ProgressBar>,
    plain: bool,
    prefix: String,
    /// When the first chip started (set by `start`, after the data were prepared).
    started: Mutex<Instant>,
    total_chips: AtomicU64,
    done_chips: AtomicU64,
    last_line: Mutex<Option<Instant>>,
}

impl Progress {
    /// `quiet` silences everything; otherwise a bar on a terminal, plain lines elsewhere.
    pub fn new(quiet: bool, prefix: &str) -> Self {
        let terminal = std::io::stderr().is_terminal();
        Self {
            bar: (!quiet && terminal).then(ProgressBar::hidden),
            plain: !quiet && !terminal,
            prefix: prefix.to_string(),
            started: Mutex::new(Instant::now()),
            total_chips: AtomicU64::new(0),
            done_chips: AtomicU64::new(0),
            last_line: Mutex::new(None),
        }
    }

    /// Clear the bar at the end.
    pub fn finish(&self) {
        if let Some(b) = &self.bar {
            b.finish_and_clear();
        }
    }
}

impl Progress {
    fn begin(&self, todo: u64) {
        self.total_chips.store(todo, Ordering::Relaxed);
        // Time the chips only: dataset loading and training before this would inflate the
        // first estimates of the time left.
        if let Ok(mut s) = self.started.lock() {
            *s = Instant::now();
        }
        if let Some(b) = &self.bar {
            b.set_draw_target(indicatif::ProgressDrawTarget::stderr());
            b.set_length(todo);
            b.reset_eta();
            b.reset_elapsed();
            b.set_style(
                ProgressStyle::with_template(
                    "{prefix} [{elapsed_precise}] {wide_bar} {pos}/{len} chips, {per_sec}, about {eta} left",
                )
                .unwrap_or_else(|_| ProgressStyle::default_bar()),
            );
            b.set_prefix(self.prefix.clone());
        }
    }
}

impl Observer for Progress {
    fn start(&self, total: usize, done: usize, chips: u64) {
        self.begin(total.saturating_sub(done) as u64 * chips);
        if self.plain {
            eprintln!(
                "{}: {total} sweep points x {chips} chips ({done} points already finished)",
                self.prefix
            );
        }
    }

    fn start_units(&self, _shard: &str, total: usize, done: usize, chips_todo: u64) {
        // The prefix names the shard already.
        self.begin(chips_todo);
        if self.plain {
            eprintln!(
                "{}: {chips_todo} chips to evaluate over {total} sweep points ({done} points already finished)",
                self.prefix
            );
        }
    }

    fn warning(&self, text: &str) {
        if self.bar.is_some() || self.plain {
            eprintln!("{}: warning: {text}", self.prefix);
        }
    }

    fn chip_done(&self) {
        let done = self.done_chips.fetch_add(1, Ordering::Relaxed) + 1;
        if let Some(b) = &self.bar {
            b.inc(1);
        } else if self.plain {
            // A plain line at most every 10 s, with an estimate of the time left.
            let now = Instant::now();
            let Ok(mut last) = self.last_line.lock() else {
                return;
            };
            if last.is_none_or(|t| now.duration_since(t).as_secs_f64() >= 10.0) {
                *last = Some(now);
                let total = self.total_chips.load(Ordering::Relaxed).max(1);
                let el = self
                    .started
                    .lock()
                    .map(|s| s.elapsed().as_secs_f64())
                    .unwrap_or(0.0);
                eprintln!(
                    "{}: {done}/{total} chips, {:.0} s elapsed, {}",
                    self.prefix,
                    el,
                    time_left(el, done, total)
                );
            }
        }
    }

    fn should_stop(&self) -> bool {
        interrupted()
    }

    fn point_done(&self, _point: usize, line: &str) {
        if let Some(b) = &self.bar {
            b.println(line);
        } else if self.plain {
            eprintln!("{}: {line}", self.prefix);
        }
        hold_for_tests();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The first estimate waits for enough work; then it is the mean rate times what is left.
    #[test]
    fn time_left_waits_then_uses_the_mean_rate() {
        assert_eq!(time_left(0.5, 1, 1000), "estimating the time left");
        assert_eq!(time_left(10.0, 10, 1000), "estimating the time left");
        assert_eq!(time_left(4.0, 100, 1000), "about 36 s left");
    }
}
