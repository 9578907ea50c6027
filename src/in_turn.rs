//! Work items taken in turn by a few threads, each thread with state of its own.

use std::sync::{Mutex, PoisonError};

/// Runs `work` on every item, on up to `threads` threads (this one among them) that each take
/// the next item not yet taken, so a thread that runs slower takes fewer. Each thread keeps
/// state of its own from `init`. Returns the results in the items' order and every thread's
/// state. Helper threads are named `name-1`, `name-2`, …; where none can be started, this
/// thread does everything, and a helper's panic is passed on.
pub fn in_turn<T, S, R>(
    items: Vec<T>,
    threads: usize,
    name: &str,
    init: impl Fn() -> S + Sync,
    work: impl Fn(&mut S, T) -> R + Sync,
) -> (Vec<R>, Vec<S>)
where
    T: Send,
    S: Send,
    R: Send,
{
    let count = items.len();
    let queue = Mutex::new(items.into_iter().enumerate());
    let run = || {
        let mut state = init();
        let mut done = Vec::new();
        loop {
            let next = queue.lock().unwrap_or_else(PoisonError::into_inner).next();
            let Some((i, item)) = next else {
                return (done, state);
            };
            done.push((i, work(&mut state, item)));
        }
    };
    let per_thread = std::thread::scope(|scope| {
        let helpers: Vec<_> = (1..threads.min(count))
            .filter_map(|n| {
                let builder = std::thread::Builder::new().name(format!("{name}-{n}"));
                builder.spawn_scoped(scope, run).ok()
            })
            .collect();
        let mut all = vec![run()];
        all.extend(helpers.into_iter().map(|helper| {
            helper
                .join()
                .unwrap_or_else(|panic| std::panic::resume_unwind(panic))
        }));
        all
    });
    let mut results = Vec::with_capacity(count);
    let mut states = Vec::with_capacity(per_thread.len());
    for (done, state) in per_thread {
        results.extend(done);
        states.push(state);
    }
    results.sort_by_key(|&(i, _)| i);
    (results.into_iter().map(|(_, r)| r).collect(), states)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_item_is_worked_once_and_results_keep_the_items_order() {
        // Known answer: squares of 0..100 in order, the items shared out over the threads.
        for threads in [0, 1, 2, 3, 200] {
            let (results, states) = in_turn(
                (0u64..100).collect(),
                threads,
                "test",
                || 0u32,
                |taken, x| {
                    *taken += 1;
                    x * x
                },
            );
            assert_eq!(results, (0u64..100).map(|x| x * x).collect::<Vec<_>>());
            assert_eq!(states.iter().sum::<u32>(), 100, "{threads} threads");
            assert_eq!(states.len(), threads.clamp(1, 100));
        }
    }
}
