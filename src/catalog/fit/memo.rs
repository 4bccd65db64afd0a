//! Fits remembered within a run: a model's sites mostly share kinds, parameters and ranges.

use std::collections::HashMap;
use std::sync::{LazyLock, Mutex};

use super::{FitBound, Pwl};

/// Entries kept before a memo starts afresh.
const CAPACITY: usize = 1 << 14;

/// A memo key: the kind's id, then the bits of every number the fit depends on.
pub type Key = (&'static str, Vec<u64>);

/// The key of `kind` with the numbers `values`.
pub fn key(kind: &'static str, values: impl IntoIterator<Item = f64>) -> Key {
    (kind, values.into_iter().map(f64::to_bits).collect())
}

/// Fits with their bounds, by key.
pub struct Memo(LazyLock<Mutex<HashMap<Key, (Pwl, FitBound)>>>);

impl Memo {
    pub const fn new() -> Memo {
        Memo(LazyLock::new(|| Mutex::new(HashMap::new())))
    }

    pub fn get(&self, key: &Key) -> Option<(Pwl, FitBound)> {
        self.0
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .get(key)
            .cloned()
    }

    pub fn insert(&self, key: Key, fit: (Pwl, FitBound)) {
        let mut memo = self.0.lock().unwrap_or_else(|e| e.into_inner());
        if memo.len() >= CAPACITY {
            memo.clear();
        }
        memo.insert(key, fit);
    }
}
