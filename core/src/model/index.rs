//! The id → position index of the model's nodes and links.
//!
//! A table of positions only: the ids themselves live once, in the elements, and a lookup
//! compares against them. A `HashMap<String, usize>` would keep a second copy of every id and
//! take about 33 bytes per bucket; this takes 5, which at a million elements is the difference
//! between some 140 MB and 10 MB.

use hashbrown::{DefaultHashBuilder, HashTable};
use std::hash::BuildHasher;

/// What [`IdIndex::insert`] did.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Insert {
    Added,
    /// The id is already at another position.
    Duplicate,
    /// More elements than the index can number (over four thousand million).
    Full,
}

#[derive(Clone, Default)]
pub(crate) struct IdIndex {
    table: HashTable<u32>,
    hasher: DefaultHashBuilder,
}

impl std::fmt::Debug for IdIndex {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "IdIndex({} ids)", self.table.len())
    }
}

impl IdIndex {
    /// The position of `id`; `ids(k)` is the id at position `k`.
    pub(crate) fn find<'a>(&self, id: &str, ids: impl Fn(usize) -> &'a str) -> Option<usize> {
        let hash = self.hasher.hash_one(id);
        self.table.find(hash, |&k| ids(k as usize) == id).map(|&k| k as usize)
    }

    /// Records that `id` is at `position` (nothing is recorded unless the answer is `Added`).
    /// `ids(k)` is called only for positions already recorded (to compare, and to hash them
    /// again when the table grows).
    pub(crate) fn insert<'a>(&mut self, id: &str, position: usize, ids: impl Fn(usize) -> &'a str) -> Insert {
        let Ok(stored) = u32::try_from(position) else { return Insert::Full };
        let hash = self.hasher.hash_one(id);
        if self.table.find(hash, |&k| ids(k as usize) == id).is_some() {
            return Insert::Duplicate;
        }
        let hasher = &self.hasher;
        self.table.insert_unique(hash, stored, |&k| hasher.hash_one(ids(k as usize)));
        Insert::Added
    }
}
