//! Batch progress on stderr: a live bar when stderr is a terminal, plain lines every few
//! seconds otherwise (cluster logs), nothing with `--quiet`.

use std::io::IsTerminal;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::{Duration, Instant};

use indicatif::{ProgressBar, ProgressStyle};

use crate::batch::Progress;
use crate::measure::{Status, TrialRecord};

pub struct Bar {
    quiet: bool,
    bar: Option<ProgressBar>,
    total: AtomicUsize,
    done: AtomicUsize,
    flagged: AtomicUsize,
    errors: AtomicUsize,
    started: Instant,
    last_line: Mutex<Instant>,
}

impl Bar {
    pub fn new(quiet: bool) -> Self {
        let bar = (!quiet && std::io::stderr().is_terminal()).then(|| {
            let b = ProgressBar::new(0);
            if let Ok(style) = ProgressStyle::with_template(
                "{bar:30} {pos}/{len} trials  {msg}  {per_sec}  eta {eta}",
            ) {
                b.set_style(style);
            }
            b
        });
        Bar {
            quiet,
            bar,
            total: AtomicUsize::new(0),
            done: AtomicUsize::new(0),
            flagged: AtomicUsize::new(0),
            errors: AtomicUsize::new(0),
            started: Instant::now(),
            last_line: Mutex::new(Instant::now()),
        }
    }
}

impl Progress for Bar {
    fn start(&self, total: usize) {
        self.total.store(total, Ordering::Relaxed);
        if let Some(b) = &self.bar {
            b.set_length(total as u64);
        }
    }

    fn trial_done(&self, record: &TrialRecord, _reused: bool) {
        let done = self.done.fetch_add(1, Ordering::Relaxed) + 1;
        match record.status {
            Status::Flagged => {
                self.flagged.fetch_add(1, Ordering::Relaxed);
            }
            Status::Error => {
                self.errors.fetch_add(1, Ordering::Relaxed);
            }
            Status::Ok => {}
        }
        let flagged = self.flagged.load(Ordering::Relaxed);
        let errors = self.errors.load(Ordering::Relaxed);
        if let Some(b) = &self.bar {
            b.set_message(format!("{flagged} flagged, {errors} errors"));
            b.inc(1);
        } else if !self.quiet {
            if let Ok(mut last) = self.last_line.lock() {
                let total = self.total.load(Ordering::Relaxed);
                if last.elapsed() >= Duration::from_secs(10) || done == total {
                    *last = Instant::now();
                    let rate = done as f64 / self.started.elapsed().as_secs_f64().max(1e-9);
                    let left = (total - done.min(total)) as f64 / rate.max(1e-9);
                    eprintln!(
                        "latchtime: {done}/{total} trials, {flagged} flagged, {errors} errors, {rate:.1} trials/s, {left:.0} s left"
                    );
                }
            }
        }
    }

    fn finish(&self) {
        if let Some(b) = &self.bar {
            b.finish_and_clear();
        }
    }
}
