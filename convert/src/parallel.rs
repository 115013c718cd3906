//! Work over images on all cores: the thread pool a command runs in and the
//! two ways image loops use it, both giving the same result for any number
//! of threads (results in image order; sums reduced in that order).

use std::ops::Range;

use rayon::prelude::*;

use crate::error::{Error, Result};

/// Run `f` on a pool of `threads` threads (`None` or 0: rayon's global pool,
/// one thread per core unless `RAYON_NUM_THREADS` says otherwise). Every
/// [`map_ordered`] and [`chunked`] call inside `f` uses that pool.
pub fn with_threads<R: Send>(threads: Option<usize>, f: impl FnOnce() -> R + Send) -> Result<R> {
    match threads {
        None | Some(0) => Ok(f()),
        Some(n) => {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(n)
                .build()
                .map_err(|e| Error::new("--threads", format!("cannot start {n} threads: {e}")))?;
            Ok(pool.install(f))
        }
    }
}

/// `f(state, i)` for every `i` in `0..n`, in parallel, results in index
/// order. `init` makes the per-worker state (a model workspace, say); `f`
/// must not depend on which worker's state it gets beyond what `init` sets.
pub fn map_ordered<S, R: Send>(
    n: usize,
    init: impl Fn() -> S + Sync + Send,
    f: impl Fn(&mut S, usize) -> R + Sync + Send,
) -> Vec<R> {
    (0..n).into_par_iter().map_init(init, f).collect()
}

/// `f(range)` on one contiguous range of `0..n` per pool thread (the
/// ranges cover `0..n` in order, none empty unless `n` is 0), results in
/// range order: for accumulators too large to keep one per item
/// (histograms), whose merge must be exact (integer counts, min and max).
pub fn chunked<R: Send>(n: usize, f: impl Fn(Range<usize>) -> R + Sync + Send) -> Vec<R> {
    let parts = rayon::current_num_threads().clamp(1, n.max(1));
    let ranges: Vec<Range<usize>> = (0..parts)
        .map(|k| k * n / parts..(k + 1) * n / parts)
        .collect();
    ranges.into_par_iter().map(f).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ranges_cover_in_order_and_maps_keep_order() {
        for threads in [1, 2, 3, 8] {
            for n in [0, 1, 2, 5, 17] {
                let r = with_threads(Some(threads), || chunked(n, |r| r)).unwrap();
                let flat: Vec<usize> = r.iter().flat_map(|r| r.clone()).collect();
                assert_eq!(flat, (0..n).collect::<Vec<_>>(), "{threads} threads, {n}");
                assert!(n == 0 || r.iter().all(|r| !r.is_empty()));
                assert!(r.len() <= threads.max(1));
                let m =
                    with_threads(Some(threads), || map_ordered(n, || (), |_, i| i * i)).unwrap();
                assert_eq!(m, (0..n).map(|i| i * i).collect::<Vec<_>>());
            }
        }
    }
}
