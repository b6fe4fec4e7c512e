//! Random streams keyed by identity, never by rank or thread.
//!
//! The stream of particle `id` in synchronisation interval `e` is a xoshiro256++ generator
//! seeded by a strong hash of (job seed, purpose tag, id, e). Identities carry the error
//! group in their top bits, so children inherit their parent's group.

use rand::SeedableRng;
use rand_xoshiro::Xoshiro256PlusPlus;

/// The generator used everywhere.
pub type Stream = Xoshiro256PlusPlus;

/// Purpose tags keep the streams of different uses apart.
pub mod tag {
    pub const INITIAL_DRAW: u64 = 0x1a1f_0001;
    pub const INITIAL_ID: u64 = 0x1a1f_0002;
    pub const FLIGHT: u64 = 0x1a1f_0003;
    pub const CHILD_ID: u64 = 0x1a1f_0004;
    pub const PRIORITY: u64 = 0x1a1f_0005;
}

/// Bits of an identity that hold the error group.
pub const GROUP_SHIFT: u32 = 48;
const LOW_MASK: u64 = (1 << GROUP_SHIFT) - 1;

/// SplitMix64 finaliser: a bijective 64-bit mixer with full avalanche.
#[inline]
pub fn mix(mut z: u64) -> u64 {
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

/// Hash of a sequence of words (order matters).
#[inline]
pub fn hash(words: &[u64]) -> u64 {
    let mut h = 0x9e37_79b9_7f4a_7c15u64;
    for &w in words {
        h = mix(h ^ mix(w.wrapping_add(0x632b_e59b_d9b4_e019)));
    }
    h
}

/// A stream for the given key words.
#[inline]
pub fn stream(words: &[u64]) -> Stream {
    Stream::seed_from_u64(hash(words))
}

/// Group of an identity.
#[inline]
pub fn group_of(id: u64) -> u32 {
    (id >> GROUP_SHIFT) as u32
}

/// An identity in `group` with low bits from `h`.
#[inline]
pub fn make_id(group: u32, h: u64) -> u64 {
    ((group as u64) << GROUP_SHIFT) | (h & LOW_MASK)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::Rng;

    #[test]
    fn ids_keep_their_group_and_streams_differ() {
        let id = make_id(7, hash(&[1, 2, 3]));
        assert_eq!(group_of(id), 7);
        let a: u64 = stream(&[1, id, 0]).random();
        let b: u64 = stream(&[1, id, 1]).random();
        let c: u64 = stream(&[1, id, 0]).random();
        assert_ne!(a, b);
        assert_eq!(a, c);
    }
}
