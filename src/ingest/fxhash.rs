//! A small multiplicative hasher (the one rustc uses) for the short names and id lists looked up
//! per row while importing; SipHash's resistance to chosen keys is not needed for a plant's own
//! characteristic and level names and costs several times as much.

use std::collections::{HashMap, HashSet};
use std::hash::{BuildHasherDefault, Hasher};

/// FxHash: rotate, xor, multiply per 64-bit word; a folded multiply to finish.
#[derive(Debug, Default, Clone, Copy)]
pub(crate) struct FxHasher {
    hash: u64,
}

const FX_K: u64 = 0x517c_c1b7_2722_0a95;
/// 2^64 / golden ratio, odd.
const FOLD_K: u64 = 0x9e37_79b9_7f4a_7c15;

impl FxHasher {
    #[inline]
    fn add(&mut self, word: u64) {
        self.hash = (self.hash.rotate_left(5) ^ word).wrapping_mul(FX_K);
    }
}

impl Hasher for FxHasher {
    #[inline]
    fn write(&mut self, bytes: &[u8]) {
        let mut chunks = bytes.chunks_exact(8);
        for chunk in &mut chunks {
            self.add(u64::from_le_bytes(chunk.try_into().expect("8 bytes")));
        }
        let rest = chunks.remainder();
        if !rest.is_empty() {
            let mut word = [0u8; 8];
            word[..rest.len()].copy_from_slice(rest);
            self.add(u64::from_le_bytes(word));
        }
    }

    #[inline]
    fn write_u8(&mut self, i: u8) {
        self.add(i as u64);
    }

    #[inline]
    fn write_u32(&mut self, i: u32) {
        self.add(i as u64);
    }

    #[inline]
    fn write_u64(&mut self, i: u64) {
        self.add(i);
    }

    #[inline]
    fn write_usize(&mut self, i: usize) {
        self.add(i as u64);
    }

    /// The multiply per word leaves the low bits of the hash depending on the low bits of the
    /// input only, and the hash table picks buckets by the low bits: a packed key of level indices
    /// whose low bits hold only the last factor put 76,800 combinations into 480 buckets
    /// (measured: 40 % of the reading thread's time in one probe loop). A folded multiply (the
    /// high and low halves of a 128-bit product, xored) mixes every bit into every bit.
    fn finish(&self) -> u64 {
        let product = u128::from(self.hash) * u128::from(FOLD_K);
        (product >> 64) as u64 ^ product as u64
    }
}

/// A `HashMap` with [`FxHasher`].
pub(crate) type FxMap<K, V> = HashMap<K, V, BuildHasherDefault<FxHasher>>;

/// A `HashSet` with [`FxHasher`].
pub(crate) type FxSet<K> = HashSet<K, BuildHasherDefault<FxHasher>>;

#[cfg(test)]
mod tests {
    use super::FxHasher;
    use std::hash::Hasher;

    #[test]
    fn packed_level_keys_spread_over_the_buckets() {
        // The 76,800 combinations of 8 x 4 x 5 x 12 x 40 levels, packed 12 bits per factor as the
        // import packs them. A table of 131,072 buckets picks by the low 17 bits; uniformly
        // random hashes would fill 131,072 x (1 - exp(-76,800 / 131,072)) = about 58,000 of them
        // (the plain multiply fills 480).
        let mut buckets = std::collections::HashSet::new();
        for m in 0u64..8 {
            for l in 0..4 {
                for s in 0..5 {
                    for o in 0..12 {
                        for lot in 0..40 {
                            let key = m << 48 | l << 36 | s << 24 | o << 12 | lot;
                            let mut h = FxHasher::default();
                            h.write_u64(key);
                            buckets.insert(h.finish() & 0x1_ffff);
                        }
                    }
                }
            }
        }
        assert!(buckets.len() > 50_000, "{} buckets", buckets.len());
    }
}
