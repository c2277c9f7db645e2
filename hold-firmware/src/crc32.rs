//! CRC-32/ISO-HDLC (the common "CRC-32": reflected polynomial 0xEDB88320,
//! initial value and final XOR 0xFFFFFFFF) with a 16-entry table, four bits
//! at a time.
//!
//! Written here rather than taken from the `crc` crate because that crate's
//! smallest table is 1 KiB, an eighth of a field tester's flash budget; this
//! one is 64 bytes, computed at compile time, and costs two table steps per
//! byte. The tests hold it to the `crc` crate on random data and to the
//! standard check value.

/// The 16 remainders of a nibble, computed at compile time.
const TABLE: [u32; 16] = {
    let mut t = [0u32; 16];
    let mut i = 0;
    while i < 16 {
        let mut c = i as u32;
        let mut k = 0;
        while k < 4 {
            c = if c & 1 != 0 { (c >> 1) ^ 0xEDB8_8320 } else { c >> 1 };
            k += 1;
        }
        // A constant block: evaluated by the compiler, never on the chip.
        #[allow(clippy::indexing_slicing)]
        {
            t[i] = c;
        }
        i += 1;
    }
    t
};

/// The CRC register after one more byte (start from `!0`, invert at the end).
#[inline]
#[must_use]
pub fn update(register: u32, byte: u8) -> u32 {
    let mut c = register ^ u32::from(byte);
    // Masked to 4 bits: always inside the table (the compiler drops the check).
    c = (c >> 4) ^ TABLE.get((c & 15) as usize).copied().unwrap_or(0);
    (c >> 4) ^ TABLE.get((c & 15) as usize).copied().unwrap_or(0)
}

/// The CRC-32 of `bytes`.
#[must_use]
pub fn checksum(bytes: &[u8]) -> u32 {
    !bytes.iter().fold(!0u32, |c, &b| update(c, b))
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// The catalogue's check value: CRC-32/ISO-HDLC of "123456789" is
    /// 0xCBF43926 (Greg Cook's CRC catalogue; typed from memory, and asserted
    /// against the `crc` crate's own entry for the algorithm on the next line).
    #[test]
    fn check_value() {
        assert_eq!(checksum(b"123456789"), 0xCBF4_3926);
        assert_eq!(checksum(b"123456789"), crc::CRC_32_ISO_HDLC.check);
        assert_eq!(checksum(b""), 0);
    }

    proptest! {
        /// Invariant: the same CRC as the `crc` crate's table-driven one.
        #[test]
        fn equals_the_crc_crate(bytes in proptest::collection::vec(any::<u8>(), 0..300)) {
            let reference = crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC);
            prop_assert_eq!(checksum(&bytes), reference.checksum(&bytes));
        }
    }
}
