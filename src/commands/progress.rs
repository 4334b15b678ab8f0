//! Progress of a run: a bar with rows/s and time remaining on an interactive
//! terminal (after the first second), periodic log lines otherwise. Draws on
//! stderr; finished and cleared before the summary is printed.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::thread::JoinHandle;

/// A running progress display; [`Progress::finish`] stops and clears it.
pub struct Progress {
    done: Arc<AtomicBool>,
    thread: JoinHandle<()>,
}

impl Progress {
    /// Watches `counter` (rows processed) against `total` rows.
    pub fn start(total: usize, counter: Arc<AtomicUsize>) -> Self {
        use std::io::IsTerminal;
        let done = Arc::new(AtomicBool::new(false));
        let stop = done.clone();
        let tty = std::io::stderr().is_terminal();
        let total = total as u64;
        let thread = std::thread::spawn(move || {
            let start = std::time::Instant::now();
            let mut bar: Option<indicatif::ProgressBar> = None;
            let mut last_log = std::time::Instant::now();
            while !stop.load(Ordering::Relaxed) {
                // Woken early by unpark when the run ends (no 100 ms wait at exit).
                std::thread::park_timeout(std::time::Duration::from_millis(100));
                let n = counter.load(Ordering::Relaxed) as u64;
                if tty && bar.is_none() && start.elapsed().as_secs_f64() > 1.0 {
                    let b = indicatif::ProgressBar::new(total.max(1));
                    b.set_style(indicatif::ProgressStyle::with_template("{bar:40} {pos}/{len} rows  {per_sec}  eta {eta}").unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()));
                    bar = Some(b);
                }
                if let Some(b) = &bar {
                    b.set_position(n);
                } else if !tty && last_log.elapsed().as_secs() >= 10 {
                    let rate = n as f64 / start.elapsed().as_secs_f64();
                    tracing::info!(rows = n, total, rows_per_s = rate.round(), "progress");
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
