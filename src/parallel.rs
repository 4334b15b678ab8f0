//! Parallel execution over fixed chunks of rows: the one place that knows
//! about threads and progress. Results never depend on the thread count or
//! the chunk size (each row is computed alone; order is kept).

use std::sync::Arc;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Default rows per parallel work unit.
pub const DEFAULT_CHUNK_ROWS: usize = 4096;

/// How a batch is executed: chunk size and an optional progress counter.
/// Carries no physics; the physics contexts take it per call.
#[derive(Clone, Debug)]
pub struct Exec {
    /// Rows per parallel work unit (results do not depend on it).
    pub chunk_rows: usize,
    /// Rows processed so far (for progress displays); added to per chunk.
    pub progress: Option<Arc<AtomicUsize>>,
}

impl Default for Exec {
    fn default() -> Self {
        Self { chunk_rows: DEFAULT_CHUNK_ROWS, progress: None }
    }
}

impl Exec {
    /// Maps `f` over `rows` in parallel over fixed chunks (see [`par_map_chunks`]).
    pub fn map<T: Sync, R: Send>(&self, rows: &[T], f: impl Fn(&T) -> R + Sync) -> Vec<R> {
        par_map_chunks(rows, self.chunk_rows, self.progress.as_deref(), f)
    }
}

/// Maps `f` over `rows` in parallel over fixed chunks of `chunk_rows`,
/// keeping input order (so results do not depend on the thread count), and
/// adds each finished chunk's size to `progress`.
pub fn par_map_chunks<T: Sync, R: Send>(rows: &[T], chunk_rows: usize, progress: Option<&AtomicUsize>, f: impl Fn(&T) -> R + Sync) -> Vec<R> {
    use rayon::prelude::*;
    let k = chunk_rows.max(1);
    // Each chunk writes its results straight into its place in the output
    // (no per-chunk vectors gathered and copied afterwards).
    let mut out: Vec<R> = Vec::with_capacity(rows.len());
    rows.par_chunks(k).zip(out.spare_capacity_mut()[..rows.len()].par_chunks_mut(k)).for_each(|(c, slots)| {
        for (x, slot) in c.iter().zip(slots.iter_mut()) {
            slot.write(f(x));
        }
        if let Some(p) = progress {
            p.fetch_add(c.len(), Ordering::Relaxed);
        }
    });
    // SAFETY: the zip above pairs every row with its own slot (equal chunk
    // sizes over equal lengths), and for_each returns only after every chunk
    // was written; a panic in `f` propagates before this point (the written
    // results then leak, which is safe).
    unsafe { out.set_len(rows.len()) };
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn order_and_progress_do_not_depend_on_chunking() {
        let rows: Vec<u64> = (0..10_007).collect();
        let counter = Arc::new(AtomicUsize::new(0));
        let a = Exec { chunk_rows: 1, progress: None }.map(&rows, |x| x * 3);
        let b = Exec { chunk_rows: 4096, progress: Some(counter.clone()) }.map(&rows, |x| x * 3);
        assert_eq!(a, b);
        assert_eq!(counter.load(Ordering::Relaxed), rows.len());
    }
}
