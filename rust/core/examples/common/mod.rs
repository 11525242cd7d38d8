//! Pieces shared by the profiling examples.

/// FNV-1a (64-bit) over the bits of every output, for checking that a
/// change leaves results bit-identical (printed when `HASH` is set).
pub fn checksum(floats: &[&[f64]], status: &[u8], iterations: &[u32]) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    let mut eat = |bytes: &[u8]| {
        for &b in bytes {
            h ^= u64::from(b);
            h = h.wrapping_mul(0x0000_0100_0000_01b3);
        }
    };
    for part in floats {
        for v in part.iter() {
            eat(&v.to_bits().to_le_bytes());
        }
    }
    eat(status);
    for it in iterations {
        eat(&it.to_le_bytes());
    }
    h
}
