//! The id → position index of the model's nodes and links.
//!
//! A table of positions only: the ids themselves live once, in the elements, and a lookup
//! compares against them. A `HashMap<String, usize>` would keep a second copy of every id and
//! take about 33 bytes per bucket; this takes 5, which at a million elements is the difference
//! between some 140 MB and 10 MB.
//!
//! While a model is being read, the index also keeps each id's hash, so that growing the table
//! does not go back to the ids scattered through the element list (at a million elements that
//! took half a second); [`IdIndex::settle`] drops them once the model is read.

use hashbrown::hash_table::Entry;
use hashbrown::{DefaultHashBuilder, HashTable};
use std::hash::BuildHasher;
use std::sync::OnceLock;

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
    /// The short hash of the id at each position, while the model grows (empty once settled).
    hashes: Vec<u32>,
}

impl std::fmt::Debug for IdIndex {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "IdIndex({} ids)", self.table.len())
    }
}

/// The table's hash of a short hash: spread over 64 bits (the table takes its bucket from the
/// low bits and a tag from the high ones).
fn spread(h: u32) -> u64 {
    u64::from(h).wrapping_mul(0x9e37_79b9_7f4a_7c15)
}

impl IdIndex {
    fn short_hash(&self, id: &str) -> u32 {
        (self.hasher.hash_one(id) >> 32) as u32
    }

    /// The position of `id`; `ids(k)` is the id at position `k`.
    pub(crate) fn find<'a>(&self, id: &str, ids: impl Fn(usize) -> &'a str) -> Option<usize> {
        let h = self.short_hash(id);
        self.table.find(spread(h), |&k| ids(k as usize) == id).map(|&k| k as usize)
    }

    /// Records that `id` is at `position` (nothing is recorded unless the answer is `Added`).
    /// `ids(k)` is called only for positions already recorded (to compare, and to hash them
    /// again when the table grows after [`IdIndex::settle`]).
    pub(crate) fn insert<'a>(&mut self, id: &str, position: usize, ids: impl Fn(usize) -> &'a str) -> Insert {
        let Ok(stored) = u32::try_from(position) else { return Insert::Full };
        let h = self.short_hash(id);
        let (hasher, hashes) = (&self.hasher, &self.hashes);
        let rehash = |&k: &u32| match hashes.get(k as usize) {
            Some(&hk) => spread(hk),
            None => spread((hasher.hash_one(ids(k as usize)) >> 32) as u32),
        };
        // One probe sequence both looks for the id and finds the free slot.
        match self.table.entry(spread(h), |&k| ids(k as usize) == id, rehash) {
            Entry::Occupied(_) => return Insert::Duplicate,
            Entry::Vacant(slot) => {
                slot.insert(stored);
            }
        }
        if self.hashes.len() == position {
            self.hashes.push(h);
        }
        Insert::Added
    }

    /// Makes room for `additional` more ids without growing (and so without hashing every id
    /// again) while they are added. `ids(k)` as for [`IdIndex::insert`].
    pub(crate) fn reserve<'a>(&mut self, additional: usize, ids: impl Fn(usize) -> &'a str) {
        let (hasher, hashes) = (&self.hasher, &self.hashes);
        self.table.reserve(additional, |&k| match hashes.get(k as usize) {
            Some(&hk) => spread(hk),
            None => spread((hasher.hash_one(ids(k as usize)) >> 32) as u32),
        });
        self.hashes.reserve(additional);
    }

    /// Drops the hashes kept while the model grew (lookups are unchanged).
    pub(crate) fn settle(&mut self) {
        self.hashes = Vec::new();
    }

    /// The index of the `len` ids `ids(0)`, `ids(1)`, ... (which are unique).
    fn build<'a>(len: usize, ids: impl Fn(usize) -> &'a str) -> Self {
        let mut index = IdIndex { table: HashTable::with_capacity(len), ..IdIndex::default() };
        index.hashes.reserve_exact(len);
        for k in 0..len {
            // The ids of a model are unique (its `add_*` refused duplicates), and `len` fits:
            // every answer is `Added`.
            index.insert(ids(k), k, &ids);
        }
        index.settle();
        index
    }
}

/// An [`IdIndex`] that may be freed ([`ReleasableIndex::release`]) and is then made again from
/// the elements' ids at its first use.
#[derive(Clone, Debug, Default)]
pub(crate) struct ReleasableIndex(OnceLock<IdIndex>);

impl ReleasableIndex {
    /// The index of the `len` ids `ids(k)`, made again if it was released.
    pub(crate) fn get<'a>(&self, len: usize, ids: impl Fn(usize) -> &'a str) -> &IdIndex {
        self.0.get_or_init(|| IdIndex::build(len, ids))
    }

    /// [`ReleasableIndex::get`], to change.
    pub(crate) fn get_mut<'a>(&mut self, len: usize, ids: impl Fn(usize) -> &'a str) -> &mut IdIndex {
        if self.0.get().is_none() {
            self.0 = OnceLock::from(IdIndex::build(len, ids));
        }
        // Set just above when it was not.
        self.0.get_mut().expect("the index was just made")
    }

    /// Makes room for `additional` more ids in the index, unless it is released (it is then
    /// made at its full size when next used).
    pub(crate) fn reserve<'a>(&mut self, additional: usize, ids: impl Fn(usize) -> &'a str) {
        if let Some(index) = self.0.get_mut() {
            index.reserve(additional, ids);
        }
    }

    /// Frees the index.
    pub(crate) fn release(&mut self) {
        self.0 = OnceLock::new();
    }
}
