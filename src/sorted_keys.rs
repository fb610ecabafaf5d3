//! Sorted keys searched level by level, for the directories of the on-disk state files and the
//! node index's in-order stage.
//!
//! A plain binary search over a few hundred thousand keys touches a new cache line at almost
//! every step, and the ingest's lookups are random: at the 16x benchmark the directory searches
//! of the element state were about 4 % of the ingest (BENCHMARKS.md, "Lookups at scale"). Here
//! every [`STRIDE`]th key of a level is copied to the level above, until a level is no longer
//! than one stride; a search runs from the top and, on each level below, only within the
//! stretch of [`STRIDE`] keys the level above chose (one or two cache lines). This is the
//! layout of a static B+-tree kept in plain vectors (common practice, no source); the upper
//! levels add about 1/15 to the keys' memory.

/// Keys per stretch: the fan-out between levels.
pub const STRIDE: usize = 16;

/// Keys in increasing order, with the levels above them.
#[derive(Debug, Clone)]
pub struct SortedKeys<K> {
    /// `levels[0]` holds every key; `levels[i + 1]` every [`STRIDE`]th key of `levels[i]`.
    levels: Vec<Vec<K>>,
}

impl<K> Default for SortedKeys<K> {
    fn default() -> Self {
        Self {
            levels: vec![Vec::new()],
        }
    }
}

impl<K: Ord + Copy> SortedKeys<K> {
    /// No keys, with room for `n` before the bottom level grows.
    #[must_use]
    pub fn with_capacity(n: usize) -> Self {
        Self {
            levels: vec![Vec::with_capacity(n)],
        }
    }

    /// Appends a key; it must not be below the last one (the search then finds the last of
    /// equal keys only when they do not span a stretch boundary, so callers keep keys distinct).
    pub fn push(&mut self, key: K) {
        debug_assert!(self.levels[0].last().is_none_or(|l| *l <= key));
        let mut level = 0;
        loop {
            let at = self.levels[level].len();
            self.levels[level].push(key);
            if !at.is_multiple_of(STRIDE) {
                return;
            }
            // The key starts a stretch: the level above holds it too.
            if level + 1 < self.levels.len() {
                level += 1;
                continue;
            }
            if self.levels[level].len() > STRIDE {
                let above = self.levels[level].iter().step_by(STRIDE).copied().collect();
                self.levels.push(above);
            }
            return;
        }
    }

    /// The number of keys.
    #[must_use]
    pub fn len(&self) -> usize {
        self.levels[0].len()
    }

    /// Whether there is no key.
    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.levels[0].is_empty()
    }

    /// The keys, in order.
    #[must_use]
    pub fn keys(&self) -> &[K] {
        &self.levels[0]
    }

    /// The keys, in order, as a vector.
    #[must_use]
    pub fn into_keys(mut self) -> Vec<K> {
        self.levels.swap_remove(0)
    }

    /// The position of the last key not above `key` (`None` when every key is above it).
    #[must_use]
    pub fn last_at_most(&self, key: &K) -> Option<usize> {
        let top = self.levels.last()?;
        let mut at = top.partition_point(|k| k <= key).checked_sub(1)?;
        for keys in self.levels.iter().rev().skip(1) {
            let start = at * STRIDE;
            let end = keys.len().min(start + STRIDE);
            // keys[start] is the key the level above holds, not above `key`: at least one.
            at = start + keys[start..end].partition_point(|k| k <= key) - 1;
        }
        Some(at)
    }
}

impl<K: Ord + Copy> FromIterator<K> for SortedKeys<K> {
    fn from_iter<I: IntoIterator<Item = K>>(iter: I) -> Self {
        let mut bottom: Vec<K> = iter.into_iter().collect();
        bottom.shrink_to_fit();
        let mut levels = vec![bottom];
        while levels.last().is_some_and(|l| l.len() > STRIDE) {
            let above = levels
                .last()
                .map(|l| l.iter().step_by(STRIDE).copied().collect())
                .unwrap_or_default();
            levels.push(above);
        }
        Self { levels }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    /// The answer of a plain binary search over all keys (the standard library's
    /// `partition_point`), which the levels must reproduce.
    fn plain(keys: &[i64], key: i64) -> Option<usize> {
        keys.partition_point(|k| *k <= key).checked_sub(1)
    }

    #[test]
    fn agrees_with_a_plain_binary_search_at_every_size() {
        let mut rng = rand::rngs::StdRng::seed_from_u64(11);
        // Sizes around the stride's powers, where levels appear.
        for n in [
            0, 1, 2, 15, 16, 17, 31, 32, 33, 255, 256, 257, 4095, 4096, 4097, 70_000,
        ] {
            let mut keys: Vec<i64> = (0..n)
                .map(|_| rng.gen_range(-1_000_000..1_000_000))
                .collect();
            keys.sort_unstable();
            keys.dedup();
            let built: SortedKeys<i64> = keys.iter().copied().collect();
            let mut pushed = SortedKeys::with_capacity(4);
            for &k in &keys {
                pushed.push(k);
            }
            assert_eq!(built.levels, pushed.levels, "n = {n}");
            assert_eq!(pushed.len(), keys.len());
            let mut probes: Vec<i64> = keys.clone();
            probes.extend(keys.iter().map(|k| k - 1));
            probes.extend(keys.iter().map(|k| k + 1));
            probes.extend([i64::MIN, i64::MAX, -1_000_001, 1_000_001]);
            for p in probes {
                assert_eq!(pushed.last_at_most(&p), plain(&keys, p), "n = {n}, key {p}");
            }
        }
    }

    #[test]
    fn tuple_keys_order_by_type_then_id() {
        // The element state's keys: (type code, id), ids of every sign.
        let keys: Vec<(u8, i64)> = (0..3u8)
            .flat_map(|t| (-300..300).map(move |i| (t, i * 7)))
            .collect();
        let s: SortedKeys<(u8, i64)> = keys.iter().copied().collect();
        assert_eq!(s.last_at_most(&(0, i64::MIN)), None);
        assert_eq!(
            s.last_at_most(&(1, -2101)),
            Some(599),
            "the last key of type 0"
        );
        assert_eq!(s.last_at_most(&(1, -2100)), Some(600));
        assert_eq!(s.last_at_most(&(2, 9)), Some(1200 + 301));
        assert_eq!(s.last_at_most(&(3, 0)), Some(1799));
        assert_eq!(s.into_keys(), keys);
    }
}
