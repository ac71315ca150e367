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

/// Whether two byte strings are equal (`a == b`), compared a word at a time in place. Ids and
/// the reader's layout stretches are short, and `==` on slices calls the library's `memcmp`,
/// which a profile of the 1e6 reading put at a tenth of the time of the thread that adds links
/// (their ends' ids compared with the nodes' ids).
#[inline]
pub(crate) fn same_bytes(a: &[u8], b: &[u8]) -> bool {
    let n = a.len();
    if n != b.len() {
        return false;
    }
    if n >= 8 {
        // Whole words, then the last eight bytes (overlapping the last whole word).
        let mut words = a.chunks_exact(8).zip(b.chunks_exact(8));
        words.all(|(x, y)| word_of(x) == word_of(y)) && word_of(&a[n - 8..]) == word_of(&b[n - 8..])
    } else if n >= 4 {
        // The first and the last four bytes (overlapping when fewer than eight).
        let half = |x: &[u8]| u32::from_le_bytes([x[0], x[1], x[2], x[3]]);
        half(a) == half(b) && half(&a[n - 4..]) == half(&b[n - 4..])
    } else {
        a.iter().zip(b).all(|(x, y)| x == y)
    }
}

/// The first eight bytes of `bytes` as one word, the first byte the lowest.
#[inline]
pub(crate) fn word_of(bytes: &[u8]) -> u64 {
    let mut w = [0u8; 8];
    w.copy_from_slice(&bytes[..8]);
    u64::from_le_bytes(w)
}

impl IdIndex {
    fn short_hash(&self, id: &str) -> u32 {
        (self.hasher.hash_one(id) >> 32) as u32
    }

    /// The position of `id`; `ids(k)` is the id at position `k`.
    pub(crate) fn find<'a>(&self, id: &str, ids: impl Fn(usize) -> &'a str) -> Option<usize> {
        let h = self.short_hash(id);
        self.table.find(spread(h), |&k| same_bytes(ids(k as usize).as_bytes(), id.as_bytes())).map(|&k| k as usize)
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
        match self.table.entry(spread(h), |&k| same_bytes(ids(k as usize).as_bytes(), id.as_bytes()), rehash) {
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

    /// The index of the `len` ids `ids(0)`, `ids(1)`, ... (which are unique: a model's `add_*`
    /// refused duplicates).
    fn build<'a>(len: usize, ids: impl Fn(usize) -> &'a str) -> Self {
        let (mut index, _) = Self::build_in_bucket_order(len, ids);
        index.settle();
        index
    }

    /// The index of the `len` ids `ids(0)`, `ids(1)`, ..., or `None` if two of them are the
    /// same. Each id's hash is kept (as while a model grows, until [`IdIndex::settle`]).
    pub(crate) fn build_checked<'a>(len: usize, ids: impl Fn(usize) -> &'a str) -> Option<Self> {
        match Self::build_in_bucket_order(len, ids) {
            (index, true) => Some(index),
            (_, false) => None,
        }
    }

    /// The index of `len` ids made at once, and whether every id went in (no two the same; a
    /// repeated id is left out).
    ///
    /// The table is made at its full size, and the ids go in by parts of the table, in the
    /// order of the bucket each hash starts at: inserted in the elements' order, each id's
    /// probe lands at a random place of a table larger than the caches (at a million nodes,
    /// 10 MB), and in a profile of the 1e6 reading the node index's inserts and growth were
    /// half of the time of the thread that adds nodes. The hashes are taken in the elements'
    /// order (their ids are read in turn), then sorted by part (a counting sort, two passes in
    /// order), each part some thousand buckets wide. The order changes no answer: the table is
    /// the same set of positions, a duplicate is found whichever of the two comes first.
    fn build_in_bucket_order<'a>(len: usize, ids: impl Fn(usize) -> &'a str) -> (Self, bool) {
        let mut index = IdIndex { table: HashTable::with_capacity(len), ..IdIndex::default() };
        let hashes: Vec<u32> = (0..len).map(|k| index.short_hash(ids(k))).collect();
        index.hashes = hashes;
        let Ok(positions) = u32::try_from(len) else { return (index, false) };
        // The table's buckets as hashbrown sizes them (7/8 of them usable); were this estimate
        // off, only the order's locality would suffer.
        let buckets = (index.table.capacity() * 8 / 7).next_power_of_two().max(1);
        let bits = (len / 1024).max(1).ilog2().min(buckets.ilog2());
        let shift = buckets.ilog2() - bits;
        let part = |h: u32| (spread(h) as usize & (buckets - 1)) >> shift;
        let mut starts = vec![0u32; (1 << bits) + 1];
        for &h in &index.hashes {
            starts[part(h) + 1] += 1;
        }
        for p in 1..starts.len() {
            starts[p] += starts[p - 1];
        }
        let mut order = vec![0u32; len];
        for k in 0..positions {
            let p = part(index.hashes[k as usize]);
            order[starts[p] as usize] = k;
            starts[p] += 1;
        }
        drop(starts);
        let mut all = true;
        let (table, hashes) = (&mut index.table, &index.hashes);
        for k in order {
            // The ids are read only where a tag matches (about one probe in a hundred): read for
            // every `k`, in this order, each was a miss of the caches (most of this function's
            // time at a million nodes).
            let entry = table.entry(
                spread(hashes[k as usize]),
                |&j| same_bytes(ids(j as usize).as_bytes(), ids(k as usize).as_bytes()),
                |&j| spread(hashes[j as usize]),
            );
            match entry {
                Entry::Occupied(_) => all = false,
                Entry::Vacant(slot) => {
                    slot.insert(k);
                }
            }
        }
        (index, all)
    }
}

/// Ids gathered as they are added without an index, then checked all different at once
/// ([`NewIds::all_different`]): the same answer as inserting each into an [`IdIndex`], with
/// memory touched in order rather than at random (the hashes are taken while each id is in the
/// caches, then sorted in parts that fit in them).
#[derive(Default)]
pub(crate) struct NewIds {
    hasher: DefaultHashBuilder,
    /// Each id's hash and position.
    hashed: Vec<(u64, u32)>,
}

impl NewIds {
    /// Records the id at `position` (below 2^32: the model's `add_*_with_new_id` refuse more).
    pub(crate) fn push(&mut self, id: &str, position: usize) {
        self.hashed.push((self.hasher.hash_one(id), position as u32));
    }

    /// Whether the ids recorded are all different; `ids(k)` is the id at position `k`.
    pub(crate) fn all_different<'a>(self, ids: impl Fn(usize) -> &'a str) -> bool {
        let n = self.hashed.len();
        // Parts of some 512 to 1024 ids by the hashes' top bits (a counting sort: two passes in
        // order), each sorted on its own and its neighbours compared.
        let bits = (n / 512).max(1).ilog2();
        let part = |h: u64| if bits == 0 { 0 } else { (h >> (64 - bits)) as usize };
        let mut starts = vec![0usize; (1 << bits) + 1];
        for &(h, _) in &self.hashed {
            starts[part(h) + 1] += 1;
        }
        for p in 1..starts.len() {
            starts[p] += starts[p - 1];
        }
        // In place (one pass of a radix sort by parts): each id moves at most once, straight to
        // its part, and no second array of them is made (at a million links a copy would be
        // 20 MB more at once, which the heap may keep after it is freed).
        let mut placed = self.hashed;
        let mut next = starts[..starts.len() - 1].to_vec();
        for p in 0..next.len() {
            while next[p] < starts[p + 1] {
                let q = part(placed[next[p]].0);
                if q == p {
                    next[p] += 1;
                } else {
                    placed.swap(next[p], next[q]);
                    next[q] += 1;
                }
            }
        }
        starts.windows(2).all(|w| {
            let part = &mut placed[w[0]..w[1]];
            part.sort_unstable();
            // Ids of equal hashes (nearly always one pair, when two ids are the same) compared
            // each with each.
            part.chunk_by(|a, b| a.0 == b.0).all(|run| {
                run.iter().enumerate().all(|(i, a)| run[i + 1..].iter().all(|b| ids(a.1 as usize) != ids(b.1 as usize)))
            })
        })
    }
}

/// An [`IdIndex`] that may be freed ([`ReleasableIndex::release`]) and is then made again from
/// the elements' ids at its first use.
#[derive(Clone, Debug, Default)]
pub(crate) struct ReleasableIndex(OnceLock<IdIndex>);

impl From<IdIndex> for ReleasableIndex {
    fn from(index: IdIndex) -> Self {
        ReleasableIndex(OnceLock::from(index))
    }
}

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

    /// Drops the index's work space ([`IdIndex::settle`]); a released index stays released (it
    /// is made settled at its first use).
    pub(crate) fn settle(&mut self) {
        if let Some(index) = self.0.get_mut() {
            index.settle();
        }
    }

    /// Frees the index.
    pub(crate) fn release(&mut self) {
        self.0 = OnceLock::new();
    }
}

#[cfg(test)]
mod tests {
    use super::{same_bytes, IdIndex, Insert, NewIds};

    /// Whether the index takes every id ([`IdIndex::insert`] answers `Added` for each).
    fn index_takes_all(ids: &[String]) -> bool {
        let mut index = IdIndex::default();
        ids.iter().enumerate().all(|(k, id)| index.insert(id, k, |j| &ids[j]) == Insert::Added)
    }

    #[test]
    fn ids_checked_at_once_are_judged_as_the_index_judges_them() {
        for n in [0usize, 1, 2, 3, 511, 512, 1025, 5000, 70_000] {
            let ids: Vec<String> = (0..n).map(|k| format!("P{k}")).collect();
            let all = |ids: &[String]| {
                let mut new = NewIds::default();
                ids.iter().enumerate().for_each(|(k, id)| new.push(id, k));
                new.all_different(|k| &ids[k])
            };
            assert!(all(&ids) && index_takes_all(&ids), "{n}");
            // One id repeated: first and last, neighbours, and far apart.
            for (a, b) in [(0, n.saturating_sub(1)), (n / 2, n / 2 + 1), (n / 3, 2 * n / 3)] {
                if a < b && b < n {
                    let mut twice = ids.clone();
                    twice[b] = twice[a].clone();
                    assert!(!all(&twice) && !index_takes_all(&twice), "{n} {a} {b}");
                }
            }
        }
    }

    /// The index made at once in the buckets' order takes the same ids as one made an id at a
    /// time, finds every id at its position and no other id, and refuses a repeated id wherever
    /// the two are (first and last, neighbours, far apart), at sizes from empty to beyond one
    /// part of the table.
    #[test]
    fn index_made_at_once_is_the_index_made_id_by_id() {
        for n in [0usize, 1, 2, 3, 7, 8, 15, 1023, 1024, 5000, 70_000] {
            let ids: Vec<String> = (0..n).map(|k| format!("J{k}")).collect();
            let index = IdIndex::build_checked(n, |k| &ids[k]).expect("unique ids");
            for (k, id) in ids.iter().enumerate() {
                assert_eq!(index.find(id, |j| &ids[j]), Some(k), "{n} {id}");
            }
            for absent in ["J-1", "", "j0", "J00"] {
                assert_eq!(index.find(absent, |j| &ids[j]), None, "{n} {absent}");
            }
            assert!(index_takes_all(&ids), "{n}");
            for (a, b) in [(0, n.saturating_sub(1)), (n / 2, n / 2 + 1), (n / 3, 2 * n / 3)] {
                if a < b && b < n {
                    let mut twice = ids.clone();
                    twice[b] = twice[a].clone();
                    assert!(IdIndex::build_checked(n, |k| &twice[k]).is_none(), "{n} {a} {b}");
                    assert!(!index_takes_all(&twice), "{n} {a} {b}");
                }
            }
            // More ids added after it (the table grows from the kept hashes).
            let mut grown = index;
            let more: Vec<String> = (0..n + 10).map(|k| format!("J{k}")).collect();
            for k in n..n + 10 {
                assert_eq!(grown.insert(&more[k], k, |j| &more[j]), Insert::Added, "{n} {k}");
            }
            assert_eq!(grown.insert(&more[0], n + 10, |j| &more[j]), Insert::Duplicate, "{n}");
            for (k, id) in more.iter().enumerate() {
                assert_eq!(grown.find(id, |j| &more[j]), Some(k), "{n} {id}");
            }
        }
    }

    #[test]
    fn bytes_compared_a_word_at_a_time_are_compared_as_slices() {
        let text = b"J1234567 P98765432, \"elevation\": 12.5";
        for n in 0..text.len() {
            for m in 0..text.len() {
                for from in [0, 1, 3] {
                    let (a, b) = (&text[..n], &text[from.min(m)..m]);
                    assert_eq!(same_bytes(a, b), a == b, "{n} {m} {from}");
                }
            }
            // One byte changed at each place, and the same bytes elsewhere in memory.
            let a = &text[..n];
            for at in 0..n {
                let mut b = a.to_vec();
                b[at] ^= 0x01;
                assert!(!same_bytes(a, &b), "{n} {at}");
            }
            let copy = a.to_vec();
            assert!(same_bytes(a, &copy));
        }
    }
}
