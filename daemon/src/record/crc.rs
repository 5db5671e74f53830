//! CRC-32 (the IEEE 802.3 polynomial, reflected, as used by zlib and PNG) guarding each log record.
//!
//! Computed by `crc32fast` (table-free SIMD folding where the CPU has it): the
//! byte-at-a-time table loop this replaced was the largest single cost of
//! reading a log. The function is fixed by the standard, not by the crate; the
//! tests hold it to the catalogue check value and to a bitwise reference.

/// Incremental CRC-32 state.
#[derive(Debug, Clone)]
pub struct Crc32(crc32fast::Hasher);

impl Crc32 {
    /// A fresh checksum.
    pub fn new() -> Self {
        Crc32(crc32fast::Hasher::new())
    }

    /// Feeds `bytes`.
    pub fn update(&mut self, bytes: &[u8]) {
        self.0.update(bytes);
    }

    /// The checksum of everything fed so far.
    pub fn finish(self) -> u32 {
        self.0.finalize()
    }
}

impl Default for Crc32 {
    fn default() -> Self {
        Self::new()
    }
}

/// CRC-32 of one byte string.
pub fn crc32(bytes: &[u8]) -> u32 {
    let mut crc = Crc32::new();
    crc.update(bytes);
    crc.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn check_value_of_the_standard_test_string() {
        // The catalogue check value of CRC-32/ISO-HDLC (the zlib CRC) for
        // "123456789" is 0xCBF43926 (Greg Cook, "Catalogue of parametrised CRC
        // algorithms"; value recalled from memory, and it is the widely quoted one).
        assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
        assert_eq!(crc32(b""), 0);
    }

    #[test]
    fn incremental_equals_one_shot() {
        let mut crc = Crc32::new();
        crc.update(b"1234");
        crc.update(b"56789");
        assert_eq!(crc.finish(), crc32(b"123456789"));
    }

    /// Bit-at-a-time CRC-32 straight from the definition (reflected
    /// polynomial 0xEDB88320, initial and final XOR 0xFFFFFFFF).
    fn bitwise_reference(bytes: &[u8]) -> u32 {
        let mut crc = 0xFFFF_FFFFu32;
        for &byte in bytes {
            crc ^= byte as u32;
            for _ in 0..8 {
                crc = if crc & 1 != 0 {
                    (crc >> 1) ^ 0xEDB8_8320
                } else {
                    crc >> 1
                };
            }
        }
        crc ^ 0xFFFF_FFFF
    }

    #[test]
    fn agrees_with_the_bitwise_definition_at_every_length_and_offset() {
        let data: Vec<u8> = (0..5100u32)
            .map(|i| (i.wrapping_mul(2_654_435_761) >> 13) as u8)
            .collect();
        for len in (0..300).chain([1023, 1024, 1025, 4999]) {
            for offset in [0, 1, 7] {
                let slice = &data[offset..offset + len];
                assert_eq!(
                    crc32(slice),
                    bitwise_reference(slice),
                    "len {len} offset {offset}"
                );
            }
        }
    }
}
