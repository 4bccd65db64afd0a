//! Runs a batch's jobs on a few threads and hands the results back in job order, so the outcome
//! does not depend on how many threads ran it. A job that panics becomes an error for that job
//! alone.

use std::panic::{AssertUnwindSafe, catch_unwind};
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};

use anyhow::{Result, anyhow};

/// Runs `work` on every item with up to `threads` threads; `done(i, &result)` is called as each
/// job finishes (in completion order). Results come back in item order.
pub fn run_ordered<T, R>(
    items: &[T],
    threads: usize,
    work: impl Fn(&T) -> Result<R> + Sync,
    done: impl Fn(usize, &Result<R>) + Sync,
) -> Vec<Result<R>>
where
    T: Sync,
    R: Send,
{
    let next = AtomicUsize::new(0);
    let results: Mutex<Vec<Option<Result<R>>>> =
        Mutex::new((0..items.len()).map(|_| None).collect());
    std::thread::scope(|scope| {
        for _ in 0..threads.clamp(1, items.len().max(1)) {
            scope.spawn(|| {
                loop {
                    let i = next.fetch_add(1, Ordering::Relaxed);
                    let Some(item) = items.get(i) else { break };
                    let r = catch_unwind(AssertUnwindSafe(|| work(item)))
                        .unwrap_or_else(|_| Err(anyhow!("internal error (see the message above)")));
                    done(i, &r);
                    results
                        .lock()
                        .expect("no job panics while holding the lock")[i] = Some(r);
                }
            });
        }
    });
    results
        .into_inner()
        .expect("no job panics while holding the lock")
        .into_iter()
        .map(|r| r.expect("every job ran"))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn results_keep_item_order_whatever_the_thread_count() {
        let items: Vec<u64> = (0..40).collect();
        let work = |&x: &u64| {
            std::thread::sleep(std::time::Duration::from_micros((40 - x) * 50));
            if x == 7 {
                Err(anyhow!("seven"))
            } else {
                Ok(x * x)
            }
        };
        for threads in [1, 2, 5] {
            let count = AtomicUsize::new(0);
            let out = run_ordered(&items, threads, work, |_, _| {
                count.fetch_add(1, Ordering::Relaxed);
            });
            assert_eq!(count.load(Ordering::Relaxed), 40);
            for (x, r) in items.iter().zip(&out) {
                match r {
                    Ok(v) => assert_eq!(*v, x * x),
                    Err(e) => assert_eq!((*x, e.to_string().as_str()), (7, "seven")),
                }
            }
        }
    }

    #[test]
    fn a_panicking_job_fails_alone() {
        let out = run_ordered(
            &[1, 0, 2],
            2,
            |&x: &i32| {
                if x == 0 {
                    panic!("zero");
                }
                Ok(10 / x)
            },
            |_, _| {},
        );
        assert_eq!(out[0].as_ref().unwrap(), &10);
        assert!(out[1].is_err());
        assert_eq!(out[2].as_ref().unwrap(), &5);
    }
}
