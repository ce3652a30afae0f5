//! Reproducible random streams, independent of thread count.
//!
//! Every random draw in hardmax comes from a stream named by the master seed and a path of
//! integers (a domain tag, then indices such as sweep point, chip, sample). The stream's key is a
//! hash of that path, so a chip's draws never depend on which thread ran it or in which order.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// The generator type used everywhere in the numerical core.
pub type Stream = ChaCha8Rng;

/// Domain tags: the first element of a stream path, so that different kinds of draws made with
/// the same indices never share a stream.
pub mod domain {
    /// Train/test split and any shuffling of the dataset.
    pub const SPLIT: u64 = 1;
    /// Static draws that make a chip (mismatch, programming error, stuck elements).
    pub const CHIP: u64 = 2;
    /// Per-decision noise on a chip.
    pub const SAMPLE_NOISE: u64 = 3;
    /// Randomly drawn hidden weight stages (part of the design, not the chip).
    pub const DESIGN: u64 = 4;
    /// Training (initialisation of iterative trainers).
    pub const TRAINING: u64 = 5;
}

/// SplitMix64 finaliser (S. Vigna, public-domain reference), a bijective 64-bit mixer.
#[inline]
pub fn mix64(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// A stream keyed by `master` and `path`. Equal arguments give equal streams; any difference
/// in any element gives an unrelated stream.
pub fn stream(master: u64, path: &[u64]) -> Stream {
    let mut seed = [0u8; 32];
    let mut h = mix64(master ^ 0x6861_7264_6D61_7800); // "hardmax\0"
    for (i, &p) in path.iter().enumerate() {
        h = mix64(h ^ mix64(p.wrapping_add(i as u64 + 1)));
    }
    for (lane, chunk) in seed.chunks_exact_mut(8).enumerate() {
        let v = mix64(h ^ (lane as u64).wrapping_mul(0xD6E8_FEB8_6659_FD93));
        chunk.copy_from_slice(&v.to_le_bytes());
    }
    ChaCha8Rng::from_seed(seed)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::Rng;

    #[test]
    fn streams_are_reproducible_and_distinct() {
        let a: Vec<u64> = (0..4)
            .map(|_| 0)
            .scan(stream(7, &[2, 0, 3]), |r, _| Some(r.gen()))
            .collect();
        let b: Vec<u64> = (0..4)
            .map(|_| 0)
            .scan(stream(7, &[2, 0, 3]), |r, _| Some(r.gen()))
            .collect();
        let c: Vec<u64> = (0..4)
            .map(|_| 0)
            .scan(stream(7, &[2, 0, 4]), |r, _| Some(r.gen()))
            .collect();
        let d: Vec<u64> = (0..4)
            .map(|_| 0)
            .scan(stream(7, &[2, 3, 0]), |r, _| Some(r.gen()))
            .collect();
        assert_eq!(a, b);
        assert_ne!(a, c);
        assert_ne!(a, d);
    }
}
