//! An exact-key memo of worst-case bounds: the same kinds, parameters and interval ends (bit
//! for bit) give the bound computed the first time.

use std::collections::HashMap;
use std::sync::{LazyLock, Mutex};

use super::ErrorBound;
use crate::catalog::kind::Kind;

/// Entries kept before the memo starts afresh (a bound costs about 0.3 ms; an entry about
/// 100 bytes).
const CAPACITY: usize = 1 << 16;

/// Kind ids, parameter bits of both sides, then the bits of the two ends.
type Key = (&'static str, &'static str, Vec<u64>);

static MEMO: LazyLock<Mutex<HashMap<Key, ErrorBound>>> = LazyLock::new(Default::default);

/// The bound for these arguments, from the memo or from `compute` (then remembered).
pub(super) fn remembered(
    from: (&Kind, &[f64]),
    to: (&Kind, &[f64]),
    lo: f64,
    hi: f64,
    compute: impl FnOnce() -> ErrorBound,
) -> ErrorBound {
    let bits: Vec<u64> = [from.1.len() as u64]
        .into_iter()
        .chain(from.1.iter().map(|v| v.to_bits()))
        .chain(to.1.iter().map(|v| v.to_bits()))
        .chain([lo.to_bits(), hi.to_bits()])
        .collect();
    let key = (from.0.id, to.0.id, bits);
    if let Some(&bound) = lock().get(&key) {
        return bound;
    }
    let bound = compute();
    let mut memo = lock();
    if memo.len() >= CAPACITY {
        memo.clear();
    }
    memo.insert(key, bound);
    bound
}

/// The memo, even after a panic elsewhere while it was held (its entries are always whole).
fn lock() -> std::sync::MutexGuard<'static, HashMap<Key, ErrorBound>> {
    MEMO.lock().unwrap_or_else(|e| e.into_inner())
}
