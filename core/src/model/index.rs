//! The id → position index of the model's nodes and links.
//!
//! A table of positions only: the ids themselves live once, in the elements, and a lookup
//! compares against them. A `HashMap<String, usize>` would keep a second copy of every id and
//! take about 33 bytes per bucket; this takes 5, which at a million elements is the difference
//! between some 140 MB and 20 MB. Each entry keeps 32 bits of its id's hash beside the
//! position, so that growing the table never goes back to the ids.

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
    /// (position, 32 bits of the id's hash)
    table: HashTable<(u32, u32)>,
    hasher: DefaultHashBuilder,
}

/// The table's hash of a stored 32-bit hash: spread over 64 bits (the table takes its bucket
/// from the low bits and a tag from the high ones).
fn spread(h: u32) -> u64 {
    u64::from(h).wrapping_mul(0x9e37_79b9_7f4a_7c15)
}

impl std::fmt::Debug for IdIndex {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "IdIndex({} ids)", self.table.len())
    }
}

impl IdIndex {
    /// The position of `id`; `ids(k)` is the id at position `k`.
    pub(crate) fn find<'a>(&self, id: &str, ids: impl Fn(usize) -> &'a str) -> Option<usize> {
        let h = self.short_hash(id);
        self.table.find(spread(h), |&(k, hk)| hk == h && ids(k as usize) == id).map(|&(k, _)| k as usize)
    }

    fn short_hash(&self, id: &str) -> u32 {
        (self.hasher.hash_one(id) >> 32) as u32
    }

    /// Records that `id` is at `position` (nothing is recorded unless the answer is `Added`).
    /// `ids(k)` is called only for positions already recorded, to tell ids with equal hashes apart.
    pub(crate) fn insert<'a>(&mut self, id: &str, position: usize, ids: impl Fn(usize) -> &'a str) -> Insert {
        let Ok(stored) = u32::try_from(position) else { return Insert::Full };
        let h = self.short_hash(id);
        if self.table.find(spread(h), |&(k, hk)| hk == h && ids(k as usize) == id).is_some() {
            return Insert::Duplicate;
        }
        self.table.insert_unique(spread(h), (stored, h), |&(_, hk)| spread(hk));
        Insert::Added
    }
}
