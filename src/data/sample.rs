//! Seeded bottom-k sampling of rows: a uniform sample without replacement that does not
//! depend on the order, batching or parallel split in which rows are offered.
//!
//! Each row gets the key `splitmix64(seed, row id)` and the `k` rows with the smallest
//! (key, row id) pairs are kept. Because the key is a fixed function of the global row
//! index, samples drawn from any split of the rows merge to the same result; with a
//! well-mixed hash every k-subset is equally likely (bottom-k sketches: Cohen & Kaplan,
//! PODC 2007). The hash is SplitMix64 (Steele, Lea & Flood, OOPSLA 2014).

use std::collections::BinaryHeap;

/// The SplitMix64 output for `seed` at position `i`.
#[inline]
pub fn splitmix64(seed: u64, i: u64) -> u64 {
    let mut z = seed.wrapping_add(i.wrapping_add(1).wrapping_mul(0x9E37_79B9_7F4A_7C15));
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// The survey sample's key of global row `row_id` under `seed` (smaller keys are
/// sampled first): [`splitmix64`]`(seed, row_id)`.
#[inline]
pub fn sample_key(seed: u64, row_id: u64) -> u64 {
    splitmix64(seed, row_id)
}

/// A row's own key: a hash of the bit patterns of its values (inputs, then target),
/// chained through [`splitmix64`]. Used in place of the global row id where rows have
/// no stable position (the partitions of a cluster): the holdout split and every sample
/// then hash this key with the seed, so they depend on the row's values and the seed
/// only, not on how the rows are split or ordered. Equal rows get equal keys.
#[inline]
pub fn value_key(row: &[f64]) -> u64 {
    let mut z = 0x6A09_E667_F3BC_C909u64;
    for v in row {
        // +0.0 and -0.0 are the same value.
        let bits = if *v == 0.0 { 0 } else { v.to_bits() };
        z = splitmix64(z, bits);
    }
    z
}

/// The `k` rows with the smallest keys among those offered, with their values.
#[derive(Debug)]
pub(crate) struct BottomK {
    k: usize,
    width: usize,
    seed: u64,
    /// Max-heap of (key, row id, slot in `values`).
    heap: BinaryHeap<(u64, u64, usize)>,
    /// `width` values per slot.
    values: Vec<f64>,
}

impl BottomK {
    pub(crate) fn new(k: usize, width: usize, seed: u64) -> Self {
        BottomK {
            k,
            width,
            seed,
            heap: BinaryHeap::new(),
            values: Vec::new(),
        }
    }

    /// Offers row `id` with its `width` values.
    #[inline]
    pub(crate) fn offer(&mut self, id: u64, row: &[f64]) {
        let key = sample_key(self.seed, id);
        self.insert(key, id, row);
    }

    fn insert(&mut self, key: u64, id: u64, row: &[f64]) {
        if self.k == 0 {
            return;
        }
        let w = self.width;
        if self.heap.len() < self.k {
            let slot = self.heap.len();
            self.values.extend_from_slice(&row[..w]);
            self.heap.push((key, id, slot));
        } else if let Some(&(tk, tid, slot)) = self.heap.peek() {
            if (key, id) < (tk, tid) {
                self.heap.pop();
                self.values[slot * w..(slot + 1) * w].copy_from_slice(&row[..w]);
                self.heap.push((key, id, slot));
            }
        }
    }

    /// Adds every row kept by `other` (same `k`, width and seed).
    pub(crate) fn absorb(&mut self, other: BottomK) {
        let w = other.width;
        for (key, id, slot) in other.heap.into_vec() {
            self.insert(key, id, &other.values[slot * w..(slot + 1) * w]);
        }
    }

    /// Every kept row as (key, row id, values), in key order (for carrying a sample
    /// between processes).
    pub(crate) fn entries(&self) -> Vec<(u64, u64, &[f64])> {
        let w = self.width;
        let mut e: Vec<(u64, u64, &[f64])> = self
            .heap
            .iter()
            .map(|&(key, id, slot)| (key, id, &self.values[slot * w..(slot + 1) * w]))
            .collect();
        e.sort_unstable_by_key(|&(key, id, _)| (key, id));
        e
    }

    /// Keeps a row with a key computed elsewhere (by [`BottomK::entries`] of a part).
    pub(crate) fn insert_keyed(&mut self, key: u64, id: u64, row: &[f64]) {
        self.insert(key, id, row);
    }

    /// Row ids in the order of their keys, and their values, row-major. Keys are a
    /// random hash of the row id, so every prefix of this order is itself a uniform
    /// sample of all the rows offered (a bottom-k' sketch for each k' ≤ k), whatever
    /// the order of the rows in the files.
    pub(crate) fn into_key_order(self) -> (Vec<u64>, Vec<f64>) {
        let w = self.width;
        let mut entries = self.heap.into_vec();
        entries.sort_unstable_by_key(|&(key, id, _)| (key, id));
        let ids = entries.iter().map(|e| e.1).collect();
        let mut values = Vec::with_capacity(entries.len() * w);
        for &(_, _, slot) in &entries {
            values.extend_from_slice(&self.values[slot * w..(slot + 1) * w]);
        }
        (ids, values)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        /// Whatever the split of the rows into parts and the order of merging, the sample
        /// equals the brute-force bottom-k: sort all rows by key, keep the first k
        /// (Cohen & Kaplan, PODC 2007, definition of the bottom-k sketch).
        #[test]
        fn split_and_merge_give_the_bottom_k(
            n in 0u64..400,
            k in 0usize..50,
            seed in any::<u64>(),
            cuts in proptest::collection::vec(0u64..400, 0..6),
        ) {
            let mut keyed: Vec<(u64, u64)> = (0..n).map(|i| (sample_key(seed, i), i)).collect();
            keyed.sort_unstable();
            let want: Vec<u64> = keyed.iter().take(k).map(|&(_, i)| i).collect();

            let mut bounds: Vec<u64> = cuts.into_iter().map(|c| c.min(n)).collect();
            bounds.push(0);
            bounds.push(n);
            bounds.sort_unstable();
            let mut parts: Vec<BottomK> = bounds
                .windows(2)
                .map(|w| {
                    let mut b = BottomK::new(k, 2, seed);
                    for i in w[0]..w[1] {
                        b.offer(i, &[i as f64, -(i as f64)]);
                    }
                    b
                })
                .collect();
            parts.reverse();
            let mut total = BottomK::new(k, 2, seed);
            for p in parts {
                total.absorb(p);
            }
            let (ids, values) = total.into_key_order();
            prop_assert_eq!(&ids, &want);
            for (r, &id) in ids.iter().enumerate() {
                prop_assert_eq!(values[2 * r], id as f64);
                prop_assert_eq!(values[2 * r + 1], -(id as f64));
            }
        }
    }
}
