//! Progress of a run: a bar with rows/s and time remaining on an interactive
//! terminal (after the first second), periodic log lines otherwise. Draws on
//! stderr; finished and cleared before the summary is printed.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicU8, AtomicUsize, Ordering};
use std::thread::JoinHandle;

use crate::pipeline::stream::Phase;

/// A running progress display; [`Progress::finish`] stops and clears it.
pub struct Progress {
    done: Arc<AtomicBool>,
    thread: JoinHandle<()>,
}

impl Progress {
    /// Watches `counter` (rows computed) against `total` rows, labelled with
    /// the run's current `phase`.
    pub fn start(total: usize, counter: Arc<AtomicUsize>, phase: Arc<AtomicU8>) -> Self {
        use std::io::IsTerminal;
        let done = Arc::new(AtomicBool::new(false));
        let stop = done.clone();
        let tty = std::io::stderr().is_terminal();
        let total = total as u64;
        // The bar appears after this long (env LAPSE_PROGRESS_AFTER_MS;
        // short runs finish without one).
        let after_s = std::env::var("LAPSE_PROGRESS_AFTER_MS").ok().and_then(|v| v.parse::<f64>().ok()).unwrap_or(1000.0) / 1e3;
        let thread = std::thread::spawn(move || {
            let start = std::time::Instant::now();
            let mut bar: Option<indicatif::ProgressBar> = None;
            let mut last_log = std::time::Instant::now();
            while !stop.load(Ordering::Relaxed) {
                // Woken early by unpark when the run ends (no 100 ms wait at exit).
                std::thread::park_timeout(std::time::Duration::from_millis(100));
                let n = counter.load(Ordering::Relaxed) as u64;
                let label = Phase::ALL.get(phase.load(Ordering::Relaxed) as usize).map_or("", |p| p.label());
                if tty && bar.is_none() && start.elapsed().as_secs_f64() >= after_s {
                    // Drawn from the current position with a fresh rate
                    // estimate (no jump from 0 counted as one instant's rate).
                    let b = indicatif::ProgressBar::new(total.max(1)).with_position(n);
                    b.set_style(indicatif::ProgressStyle::with_template("{msg:>9} {bar:40} {pos}/{len} rows  {per_sec}  eta {eta}").unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()));
                    b.reset_eta();
                    bar = Some(b);
                }
                if let Some(b) = &bar {
                    b.set_message(label);
                    b.set_position(n);
                } else if !tty && last_log.elapsed().as_secs() >= 10 {
                    let rate = n as f64 / start.elapsed().as_secs_f64();
                    tracing::info!(phase = label, rows = n, total, rows_per_s = rate.round(), "progress");
                    last_log = std::time::Instant::now();
                }
            }
            if let Some(b) = bar {
                b.finish_and_clear();
            }
        });
        Self { done, thread }
    }

    /// Stops the display and clears the bar.
    pub fn finish(self) {
        self.done.store(true, Ordering::Relaxed);
        self.thread.thread().unpark();
        let _ = self.thread.join();
    }
}
