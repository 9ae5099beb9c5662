//! CRC-16 and CRC-32 frame checks, on packed bytes and on bits-one-per-byte frames.
//!
//! Parameters in the terms of the *Catalogue of parametrised CRC algorithms* (Greg Cook,
//! reveng), which is also the source of the check and residue values:
//!
//! | name            | width | poly         | init         | refin | refout | xorout       | check        | residue      |
//! |-----------------|-------|--------------|--------------|-------|--------|--------------|--------------|--------------|
//! | CRC-16/IBM-3740 (a.k.a. CRC-16/CCITT-FALSE) | 16 | `0x1021` | `0xFFFF` | false | false | `0x0000` | `0x29B1` | `0x0000` |
//! | CRC-32/ISO-HDLC (the CRC of Ethernet, zip, PNG) | 32 | `0x04C11DB7` | `0xFFFFFFFF` | true | true | `0xFFFFFFFF` | `0xCBF43926` | `0xDEBB20E3` |
//!
//! *check* is the CRC of the nine ASCII bytes `"123456789"`. *residue* is, as the catalogue
//! defines it, the register after reading an error-free codeword (message followed by its CRC,
//! sent in the algorithm's bit order), reflected if `refout`, **without** the final XOR; see
//! [`Crc16::residue`] and [`Crc32::residue`].
//!
//! ## Bit order of bit frames
//!
//! Bits travel one per byte (`0` or `1`, the crate's convention). The bit forms process the
//! bits in the order a byte-wise CRC would consume them, so **the bit form equals the byte
//! form on packed bytes**:
//!
//! * CRC-16/IBM-3740 is not reflected: bits are taken **MSB first** (bit 7 of the first byte is
//!   the first bit). The CRC is appended MSB first (bit 15 first), i.e. big-endian bytes.
//! * CRC-32/ISO-HDLC is reflected: bits are taken **LSB first** (bit 0 of the first byte is
//!   the first bit). The CRC is appended LSB first (bit 0 first), i.e. little-endian bytes.
//!
//! ## Implementation and flash
//!
//! The byte forms use **nibble tables** (16 entries, two lookups per byte), evaluated at
//! compile time: 32 B of flash for CRC-16 and 64 B for CRC-32 (a 256-entry table would be 512 B
//! and 1 KiB; the nibble form is chosen for the Cortex-M0 parts with small flash, at roughly
//! twice the per-byte cost of a byte table). The bit forms use no table (one shift and one
//! conditional XOR per bit). Nothing allocates, nothing panics; invalid bits are reported with
//! [`ProcessError::InvalidBit`] before the register is touched.

use crate::error::ProcessError;

/// CRC-16/IBM-3740 generator polynomial (normal form, `x^16` implicit).
pub const CRC16_POLY: u16 = 0x1021;
/// CRC-16/IBM-3740 initial register.
pub const CRC16_INIT: u16 = 0xFFFF;
/// CRC-16/IBM-3740 final XOR.
pub const CRC16_XOROUT: u16 = 0x0000;
/// CRC-16/IBM-3740 of `"123456789"` (catalogue *check*).
pub const CRC16_CHECK: u16 = 0x29B1;
/// CRC-16/IBM-3740 residue (catalogue *residue*: register after an error-free codeword,
/// before the final XOR).
pub const CRC16_RESIDUE: u16 = 0x0000;
/// Bits of a CRC-16.
pub const CRC16_BITS: usize = 16;

/// CRC-32/ISO-HDLC generator polynomial (normal form; the reflected register uses
/// `0xEDB88320`).
pub const CRC32_POLY: u32 = 0x04C1_1DB7;
/// CRC-32/ISO-HDLC initial register.
pub const CRC32_INIT: u32 = 0xFFFF_FFFF;
/// CRC-32/ISO-HDLC final XOR.
pub const CRC32_XOROUT: u32 = 0xFFFF_FFFF;
/// CRC-32/ISO-HDLC of `"123456789"` (catalogue *check*).
pub const CRC32_CHECK: u32 = 0xCBF4_3926;
/// CRC-32/ISO-HDLC residue (catalogue *residue*: reflected register after an error-free
/// codeword, before the final XOR).
pub const CRC32_RESIDUE: u32 = 0xDEBB_20E3;
/// Bits of a CRC-32.
pub const CRC32_BITS: usize = 32;

/// Reflected CRC-32 polynomial (bit-reversed [`CRC32_POLY`]).
const CRC32_POLY_REFLECTED: u32 = CRC32_POLY.reverse_bits();

/// `T16[n]`: the register change of feeding nibble `n` (MSB first) into a zero register.
static T16: [u16; 16] = {
    let mut t = [0u16; 16];
    let mut n = 0;
    while n < 16 {
        let mut r = (n as u16) << 12;
        let mut b = 0;
        while b < 4 {
            r = if r & 0x8000 != 0 {
                (r << 1) ^ CRC16_POLY
            } else {
                r << 1
            };
            b += 1;
        }
        // Compile-time evaluation: an out-of-range index would fail the build, not run.
        #[allow(clippy::indexing_slicing)]
        {
            t[n] = r;
        }
        n += 1;
    }
    t
};

/// `T32[n]`: the register change of feeding nibble `n` (LSB first) into a zero reflected
/// register.
static T32: [u32; 16] = {
    let mut t = [0u32; 16];
    let mut n = 0;
    while n < 16 {
        let mut r = n as u32;
        let mut b = 0;
        while b < 4 {
            r = if r & 1 != 0 {
                (r >> 1) ^ CRC32_POLY_REFLECTED
            } else {
                r >> 1
            };
            b += 1;
        }
        // Compile-time evaluation: an out-of-range index would fail the build, not run.
        #[allow(clippy::indexing_slicing)]
        {
            t[n] = r;
        }
        n += 1;
    }
    t
};

#[inline(always)]
fn t16(n: u16) -> u16 {
    T16.get(usize::from(n & 0xF)).copied().unwrap_or(0)
}

#[inline(always)]
fn t32(n: u32) -> u32 {
    T32.get((n & 0xF) as usize).copied().unwrap_or(0)
}

/// Index of the first element of `bits` that is neither 0 nor 1.
fn first_invalid_bit(bits: &[u8]) -> Option<usize> {
    bits.iter().position(|&b| b > 1)
}

/// Streaming CRC-16/IBM-3740 (see the module docs for its parameters and bit order).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Crc16 {
    reg: u16,
}

impl Default for Crc16 {
    fn default() -> Self {
        Self::new()
    }
}

impl Crc16 {
    /// A register at [`CRC16_INIT`].
    pub const fn new() -> Self {
        Self { reg: CRC16_INIT }
    }
    /// Feeds bytes (each MSB first).
    pub fn update(&mut self, bytes: &[u8]) {
        let mut r = self.reg;
        for &byte in bytes {
            let b = u16::from(byte);
            r = (r << 4) ^ t16((r >> 12) ^ (b >> 4));
            r = (r << 4) ^ t16((r >> 12) ^ b);
        }
        self.reg = r;
    }
    /// Feeds bits one per byte, in transmission order (MSB first of each packed byte).
    /// A value other than 0/1 is rejected with [`ProcessError::InvalidBit`] and the register
    /// is left unchanged.
    pub fn update_bits(&mut self, bits: &[u8]) -> Result<(), ProcessError> {
        if let Some(index) = first_invalid_bit(bits) {
            return Err(ProcessError::InvalidBit { index });
        }
        let mut r = self.reg;
        for &bit in bits {
            let feedback = (r >> 15) ^ u16::from(bit);
            r <<= 1;
            if feedback & 1 != 0 {
                r ^= CRC16_POLY;
            }
        }
        self.reg = r;
        Ok(())
    }
    /// The CRC of everything fed so far (register XOR [`CRC16_XOROUT`]). Does not reset.
    pub const fn finish(&self) -> u16 {
        self.reg ^ CRC16_XOROUT
    }
    /// The register without the final XOR: equals [`CRC16_RESIDUE`] after an error-free
    /// codeword (message followed by its CRC, MSB first).
    pub const fn residue(&self) -> u16 {
        self.reg
    }
}

/// Streaming CRC-32/ISO-HDLC (see the module docs for its parameters and bit order).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Crc32 {
    /// Reflected register.
    reg: u32,
}

impl Default for Crc32 {
    fn default() -> Self {
        Self::new()
    }
}

impl Crc32 {
    /// A register at [`CRC32_INIT`].
    pub const fn new() -> Self {
        Self { reg: CRC32_INIT }
    }
    /// Feeds bytes (each LSB first: the algorithm is reflected).
    pub fn update(&mut self, bytes: &[u8]) {
        let mut r = self.reg;
        for &byte in bytes {
            let b = u32::from(byte);
            r = (r >> 4) ^ t32(r ^ b);
            r = (r >> 4) ^ t32(r ^ (b >> 4));
        }
        self.reg = r;
    }
    /// Feeds bits one per byte, in transmission order (LSB first of each packed byte).
    /// A value other than 0/1 is rejected with [`ProcessError::InvalidBit`] and the register
    /// is left unchanged.
    pub fn update_bits(&mut self, bits: &[u8]) -> Result<(), ProcessError> {
        if let Some(index) = first_invalid_bit(bits) {
            return Err(ProcessError::InvalidBit { index });
        }
        let mut r = self.reg;
        for &bit in bits {
            let feedback = r ^ u32::from(bit);
            r >>= 1;
            if feedback & 1 != 0 {
                r ^= CRC32_POLY_REFLECTED;
            }
        }
        self.reg = r;
        Ok(())
    }
    /// The CRC of everything fed so far (register XOR [`CRC32_XOROUT`]). Does not reset.
    pub const fn finish(&self) -> u32 {
        self.reg ^ CRC32_XOROUT
    }
    /// The (reflected) register without the final XOR: equals [`CRC32_RESIDUE`] after an
    /// error-free codeword (message followed by its CRC, LSB first).
    pub const fn residue(&self) -> u32 {
        self.reg
    }
}

/// CRC-16/IBM-3740 of `bytes`.
pub fn crc16(bytes: &[u8]) -> u16 {
    let mut c = Crc16::new();
    c.update(bytes);
    c.finish()
}

/// CRC-32/ISO-HDLC of `bytes`.
pub fn crc32(bytes: &[u8]) -> u32 {
    let mut c = Crc32::new();
    c.update(bytes);
    c.finish()
}

/// CRC-16/IBM-3740 of a bit frame (one bit per byte, MSB-first order).
pub fn crc16_bits(bits: &[u8]) -> Result<u16, ProcessError> {
    let mut c = Crc16::new();
    c.update_bits(bits)?;
    Ok(c.finish())
}

/// CRC-32/ISO-HDLC of a bit frame (one bit per byte, LSB-first order).
pub fn crc32_bits(bits: &[u8]) -> Result<u32, ProcessError> {
    let mut c = Crc32::new();
    c.update_bits(bits)?;
    Ok(c.finish())
}

/// Splits `frame` into payload and a trailing `crc_bits` field, or reports the short buffer.
fn split_crc_field(frame: &mut [u8], crc_bits: usize) -> Result<(&[u8], &mut [u8]), ProcessError> {
    let payload_len = frame
        .len()
        .checked_sub(crc_bits)
        .ok_or(ProcessError::BufferLength {
            expected: crc_bits,
            actual: frame.len(),
        })?;
    let (payload, field) = frame.split_at_mut(payload_len);
    Ok((payload, field))
}

/// Writes the CRC-16 of `frame[..len - 16]` into the last 16 entries of `frame`, MSB first
/// (bit 15 first), so the whole frame is a codeword. `frame` holds bits one per byte.
///
/// Errors: [`ProcessError::BufferLength`] (`expected` = 16, the minimum) when `frame` is
/// shorter than 16; [`ProcessError::InvalidBit`] for a payload value other than 0/1. On error
/// nothing is written.
pub fn append_crc16_bits(frame: &mut [u8]) -> Result<(), ProcessError> {
    let (payload, field) = split_crc_field(frame, CRC16_BITS)?;
    let crc = crc16_bits(payload)?;
    for (n, slot) in field.iter_mut().enumerate() {
        *slot = ((crc >> (CRC16_BITS - 1 - n)) & 1) as u8;
    }
    Ok(())
}

/// Writes the CRC-32 of `frame[..len - 32]` into the last 32 entries of `frame`, LSB first
/// (bit 0 first), so the whole frame is a codeword. `frame` holds bits one per byte.
///
/// Errors as [`append_crc16_bits`] (minimum length 32).
pub fn append_crc32_bits(frame: &mut [u8]) -> Result<(), ProcessError> {
    let (payload, field) = split_crc_field(frame, CRC32_BITS)?;
    let crc = crc32_bits(payload)?;
    for (n, slot) in field.iter_mut().enumerate() {
        *slot = ((crc >> n) & 1) as u8;
    }
    Ok(())
}

/// True when the received bit frame (payload followed by its 16 CRC bits, as written by
/// [`append_crc16_bits`]) is a CRC-16 codeword, i.e. the register after the whole frame is
/// [`CRC16_RESIDUE`].
///
/// Errors: [`ProcessError::BufferLength`] (`expected` = 16, the minimum) for a frame shorter
/// than the CRC; [`ProcessError::InvalidBit`] for a value other than 0/1 (hard decisions must
/// be 0/1).
pub fn check_crc16_bits(frame: &[u8]) -> Result<bool, ProcessError> {
    if frame.len() < CRC16_BITS {
        return Err(ProcessError::BufferLength {
            expected: CRC16_BITS,
            actual: frame.len(),
        });
    }
    let mut c = Crc16::new();
    c.update_bits(frame)?;
    Ok(c.residue() == CRC16_RESIDUE)
}

/// True when the received bit frame (payload followed by its 32 CRC bits, as written by
/// [`append_crc32_bits`]) is a CRC-32 codeword, i.e. the register after the whole frame is
/// [`CRC32_RESIDUE`].
///
/// Errors as [`check_crc16_bits`] (minimum length 32).
pub fn check_crc32_bits(frame: &[u8]) -> Result<bool, ProcessError> {
    if frame.len() < CRC32_BITS {
        return Err(ProcessError::BufferLength {
            expected: CRC32_BITS,
            actual: frame.len(),
        });
    }
    let mut c = Crc32::new();
    c.update_bits(frame)?;
    Ok(c.residue() == CRC32_RESIDUE)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nibble_tables_match_the_bitwise_register() {
        // The table form and the per-bit form of the same register agree on every byte value
        // (both derive from the catalogue parameters; this pins the table construction).
        for v in 0..=255u8 {
            let mut a = Crc16::new();
            a.update(&[v]);
            let mut b = Crc16::new();
            let bits: [u8; 8] = core::array::from_fn(|i| (v >> (7 - i)) & 1);
            b.update_bits(&bits).unwrap();
            assert_eq!(a, b, "crc16 byte {v}");
            let mut a = Crc32::new();
            a.update(&[v]);
            let mut b = Crc32::new();
            let bits: [u8; 8] = core::array::from_fn(|i| (v >> i) & 1);
            b.update_bits(&bits).unwrap();
            assert_eq!(a, b, "crc32 byte {v}");
        }
    }
}
