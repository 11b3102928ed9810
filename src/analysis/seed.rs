//! Derived seeds: every random choice of a run takes its own stream, derived from the run's
//! seed and a fixed stream number, so adding a draw in one place never shifts another.

/// The seed of stream `k` of a run seeded with `seed` (the splitmix64 finaliser, which
/// decorrelates nearby inputs; Steele, Lea & Flood 2014).
pub fn mix(seed: u64, k: u64) -> u64 {
    let mut z = seed.wrapping_add(0x9E37_79B9_7F4A_7C15u64.wrapping_mul(k.wrapping_add(1)));
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}
