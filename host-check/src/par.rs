//! Work on every core with results in a fixed order: the one pattern the
//! parallel readers (a store's key ranges, a Parquet dataset's row groups)
//! share.

use crate::Error;

/// Runs `work` over `jobs` on `threads` threads. Each thread first makes its
/// context with `context` (a database connection, say); each job gets a fresh
/// accumulator from `fresh`, and `merge` receives the accumulators in job
/// order as they complete, so the result does not depend on the thread
/// count (only a few finished jobs wait for an earlier one).
///
/// # Errors
/// The first error a worker met.
pub fn run_ordered<J: Sync, C, T: Send>(
    jobs: &[J],
    threads: usize,
    context: impl Fn() -> Result<C, Error> + Sync,
    fresh: impl Fn() -> T + Sync,
    work: impl Fn(&C, &mut T, &J) -> Result<(), Error> + Sync,
    mut merge: impl FnMut(T),
) -> Result<(), Error> {
    use std::sync::atomic::{AtomicUsize, Ordering};
    let next = AtomicUsize::new(0);
    // Past every job: a thread that failed stops the others taking more.
    let stop = || next.store(usize::MAX / 2, Ordering::Relaxed);
    let (tx, rx) = std::sync::mpsc::channel::<(usize, Result<T, Error>)>();
    std::thread::scope(|s| {
        for _ in 0..threads.clamp(1, jobs.len().max(1)) {
            let tx = tx.clone();
            let (next, context, fresh, work, stop) = (&next, &context, &fresh, &work, &stop);
            s.spawn(move || {
                let ctx = match context() {
                    Ok(c) => c,
                    Err(e) => {
                        stop();
                        let _ = tx.send((0, Err(e)));
                        return;
                    }
                };
                loop {
                    let i = next.fetch_add(1, Ordering::Relaxed);
                    let Some(job) = jobs.get(i) else { break };
                    let mut acc = fresh();
                    let r = work(&ctx, &mut acc, job).map(|()| acc);
                    let failed = r.is_err();
                    if tx.send((i, r)).is_err() || failed {
                        stop();
                        break;
                    }
                }
            });
        }
        drop(tx);
        let mut pending = std::collections::BTreeMap::new();
        let mut want = 0usize;
        for (i, r) in rx {
            if let Err(e) = r {
                return Err(e);
            }
            pending.insert(i, r);
            while let Some(r) = pending.remove(&want) {
                merge(r?);
                want += 1;
            }
        }
        if want < jobs.len() {
            return Err(Error::Input("a worker thread stopped".into()));
        }
        Ok(())
    })
}
