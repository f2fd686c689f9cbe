//! A small, stable 64-bit hash (FNV-1a) for file fingerprints, offset markers and checkpoint
//! checksums. Stability across releases matters (values are persisted), so the standard
//! library's `DefaultHasher` is not used. Not for security.

/// FNV-1a 64-bit offset basis.
const OFFSET: u64 = 0xcbf2_9ce4_8422_2325;
/// FNV-1a 64-bit prime.
const PRIME: u64 = 0x0000_0100_0000_01b3;

/// Hash a byte slice.
pub fn fnv1a64(bytes: &[u8]) -> u64 {
    let mut h = OFFSET;
    for &b in bytes {
        h ^= u64::from(b);
        h = h.wrapping_mul(PRIME);
    }
    h
}

#[cfg(test)]
mod tests {
    #[test]
    fn known_vectors() {
        // Source: FNV reference test vectors (Fowler, Noll, Vo; IETF draft-eastlake-fnv):
        // FNV-1a 64 of "" and of "a".
        assert_eq!(super::fnv1a64(b""), 0xcbf2_9ce4_8422_2325);
        assert_eq!(super::fnv1a64(b"a"), 0xaf63_dc4c_8601_ec8c);
    }
}
