//! Progress reporting for runs: an indicatif bar when stderr is a terminal, plain lines
//! otherwise, nothing with --quiet.

use std::io::IsTerminal;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Mutex;
use std::time::Instant;

use indicatif::{ProgressBar, ProgressStyle};

use crate::experiment::runner::Observer;

/// Reports a run's progress on stderr.
pub struct Progress {
    bar: Option<ProgressBar>,
    plain: bool,
    prefix: String,
    started: Instant,
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
            started: Instant::now(),
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
        if let Some(b) = &self.bar {
            b.set_draw_target(indicatif::ProgressDrawTarget::stderr());
            b.set_length(todo);
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
                let el = self.started.elapsed().as_secs_f64();
                let left = el / done as f64 * (total.saturating_sub(done)) as f64;
                eprintln!(
                    "{}: {done}/{total} chips, {:.0} s elapsed, about {:.0} s left",
                    self.prefix, el, left
                );
            }
        }
    }

    fn point_done(&self, _point: usize, line: &str) {
        if let Some(b) = &self.bar {
            b.println(line);
        } else if self.plain {
            eprintln!("{}: {line}", self.prefix);
        }
    }
}
