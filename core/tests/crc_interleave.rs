//! CRC-16/CRC-32 and the symbol bit interleaver against their published definitions.
//!
//! Sources named beside each check:
//! * [CAT] Greg Cook, "Catalogue of parametrised CRC algorithms" (reveng): entries
//!   CRC-16/IBM-3740 (width=16 poly=0x1021 init=0xffff refin=false refout=false xorout=0x0000
//!   check=0x29b1 residue=0x0000) and CRC-32/ISO-HDLC (width=32 poly=0x04c11db7 init=0xffffffff
//!   refin=true refout=true xorout=0xffffffff check=0xcbf43926 residue=0xdebb20e3).
//! * [CRC-RS] the `crc` crate (crates.io, an independent implementation of the same catalogue),
//!   constants `CRC_16_IBM_3740` and `CRC_32_ISO_HDLC`.
//! * [80211A] IEEE 802.11a-1999 clause 17.3.5.6, the two interleaver permutations, evaluated
//!   here directly from the clause's formulas.

use flatbin::crc::{
    append_crc16_bits, append_crc32_bits, check_crc16_bits, check_crc32_bits, crc16, crc16_bits,
    crc32, crc32_bits, Crc16, Crc32, CRC16_BITS, CRC16_CHECK, CRC16_RESIDUE, CRC32_BITS,
    CRC32_CHECK, CRC32_RESIDUE,
};
use flatbin::interleave::Interleaver;
use flatbin::{ConfigError, Modulation, Numerology, NumerologyParams, ProcessError};

/// xorshift64* (Marsaglia 2003 / Vigna 2016), fixed seed: reproducible inputs, no dependency.
struct XorShift(u64);
impl XorShift {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n as u64) as usize
    }
    fn bytes(&mut self, len: usize) -> Vec<u8> {
        (0..len).map(|_| self.next() as u8).collect()
    }
    fn bits(&mut self, len: usize) -> Vec<u8> {
        (0..len).map(|_| (self.next() >> 40) as u8 & 1).collect()
    }
}

fn unpack_msb_first(bytes: &[u8]) -> Vec<u8> {
    bytes
        .iter()
        .flat_map(|&b| (0..8).map(move |i| (b >> (7 - i)) & 1))
        .collect()
}

fn unpack_lsb_first(bytes: &[u8]) -> Vec<u8> {
    bytes
        .iter()
        .flat_map(|&b| (0..8).map(move |i| (b >> i) & 1))
        .collect()
}

// ---------------------------------------------------------------------------------------------
// CRC
// ---------------------------------------------------------------------------------------------

#[test]
fn check_values_of_the_catalogue() {
    // [CAT] check = CRC of the ASCII string "123456789".
    assert_eq!(crc16(b"123456789"), 0x29B1);
    assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
    assert_eq!(CRC16_CHECK, 0x29B1);
    assert_eq!(CRC32_CHECK, 0xCBF4_3926);
    // The bit forms give the same check on the unpacked string (MSB first / LSB first).
    assert_eq!(crc16_bits(&unpack_msb_first(b"123456789")).unwrap(), 0x29B1);
    assert_eq!(
        crc32_bits(&unpack_lsb_first(b"123456789")).unwrap(),
        0xCBF4_3926
    );
    // Empty message: CRC = init ^ xorout ([CAT] parameters): 0xFFFF and 0x00000000.
    assert_eq!(crc16(&[]), 0xFFFF);
    assert_eq!(crc32(&[]), 0);
}

#[test]
fn residues_of_the_catalogue() {
    // [CAT] residue: the register after an error-free codeword, before the final XOR:
    // 0x0000 for CRC-16/IBM-3740, 0xDEBB20E3 for CRC-32/ISO-HDLC. The CRC is appended in the
    // algorithm's bit order: CRC-16 big-endian (MSB first), CRC-32 little-endian (reflected).
    assert_eq!(CRC16_RESIDUE, 0x0000);
    assert_eq!(CRC32_RESIDUE, 0xDEBB_20E3);
    let mut rng = XorShift(0x5EED_C0DE);
    for len in [0usize, 1, 9, 64, 255] {
        let msg = rng.bytes(len);
        let mut cw = msg.clone();
        cw.extend_from_slice(&crc16(&msg).to_be_bytes());
        let mut c = Crc16::new();
        c.update(&cw);
        assert_eq!(c.residue(), 0x0000, "crc16 len {len}");

        let mut cw = msg.clone();
        cw.extend_from_slice(&crc32(&msg).to_le_bytes());
        let mut c = Crc32::new();
        c.update(&cw);
        assert_eq!(c.residue(), 0xDEBB_20E3, "crc32 len {len}");
        // The well-known magic of CRC-32 over a codeword (residue ^ xorout).
        assert_eq!(c.finish(), 0x2144_DF1C);
    }
}

#[test]
fn equals_the_crc_crate_on_random_inputs() {
    // [CRC-RS] on 2000 random messages of random lengths 0..600 bytes (seed fixed), whole and
    // split at a random point (streaming).
    let ref16 = crc::Crc::<u16>::new(&crc::CRC_16_IBM_3740);
    let ref32 = crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC);
    let mut rng = XorShift(0x0123_4567_89AB_CDEF);
    for _ in 0..2000 {
        let len = rng.below(600);
        let msg = rng.bytes(len);
        let want16 = ref16.checksum(&msg);
        let want32 = ref32.checksum(&msg);
        assert_eq!(crc16(&msg), want16, "len {len}");
        assert_eq!(crc32(&msg), want32, "len {len}");
        let cut = rng.below(len + 1);
        let (a, b) = msg.split_at(cut);
        let mut s16 = Crc16::new();
        s16.update(a);
        s16.update(b);
        assert_eq!(s16.finish(), want16);
        let mut s32 = Crc32::default();
        s32.update(a);
        s32.update(b);
        assert_eq!(s32.finish(), want32);
    }
}

#[test]
fn bit_form_equals_byte_form() {
    // The documented bit order (MSB first for CRC-16, LSB first for the reflected CRC-32)
    // makes the bit form equal to the byte form on packed bytes; streaming may cut the bit
    // stream anywhere, also inside a byte, and mix the two forms at byte boundaries.
    let mut rng = XorShift(42);
    for _ in 0..500 {
        let len = rng.below(200);
        let msg = rng.bytes(len);
        let b16 = unpack_msb_first(&msg);
        let b32 = unpack_lsb_first(&msg);
        assert_eq!(crc16_bits(&b16).unwrap(), crc16(&msg));
        assert_eq!(crc32_bits(&b32).unwrap(), crc32(&msg));
        let cut = rng.below(b16.len() + 1);
        let mut s16 = Crc16::new();
        s16.update_bits(&b16[..cut]).unwrap();
        s16.update_bits(&b16[cut..]).unwrap();
        assert_eq!(s16.finish(), crc16(&msg));
        let mut s32 = Crc32::new();
        s32.update_bits(&b32[..cut]).unwrap();
        s32.update_bits(&b32[cut..]).unwrap();
        assert_eq!(s32.finish(), crc32(&msg));
        // Mixed: bytes then bits.
        let byte_cut = rng.below(len + 1);
        let mut m16 = Crc16::new();
        m16.update(&msg[..byte_cut]);
        m16.update_bits(&b16[8 * byte_cut..]).unwrap();
        assert_eq!(m16.finish(), crc16(&msg));
        let mut m32 = Crc32::new();
        m32.update(&msg[..byte_cut]);
        m32.update_bits(&b32[8 * byte_cut..]).unwrap();
        assert_eq!(m32.finish(), crc32(&msg));
    }
}

#[test]
fn appended_bits_are_the_packed_crc_and_check_passes() {
    // append → check passes; the appended field is the byte-form CRC in the documented order
    // ([CAT] codeword convention: big-endian for CRC-16, little-endian for CRC-32).
    let mut rng = XorShift(7);
    for _ in 0..300 {
        let nbytes = rng.below(100);
        let msg = rng.bytes(nbytes);

        let mut f16 = unpack_msb_first(&msg);
        f16.extend([0u8; CRC16_BITS]);
        append_crc16_bits(&mut f16).unwrap();
        assert_eq!(
            &f16[8 * nbytes..],
            &unpack_msb_first(&crc16(&msg).to_be_bytes())[..]
        );
        assert_eq!(check_crc16_bits(&f16), Ok(true));

        let mut f32_ = unpack_lsb_first(&msg);
        f32_.extend([0u8; CRC32_BITS]);
        append_crc32_bits(&mut f32_).unwrap();
        assert_eq!(
            &f32_[8 * nbytes..],
            &unpack_lsb_first(&crc32(&msg).to_le_bytes())[..]
        );
        assert_eq!(check_crc32_bits(&f32_), Ok(true));

        // Payloads that are not a whole number of bytes work too.
        let nbits = rng.below(300);
        let mut f = rng.bits(nbits + CRC32_BITS);
        append_crc32_bits(&mut f).unwrap();
        assert_eq!(check_crc32_bits(&f), Ok(true));
        let mut f = rng.bits(nbits + CRC16_BITS);
        append_crc16_bits(&mut f).unwrap();
        assert_eq!(check_crc16_bits(&f), Ok(true));
    }
}

/// Every single and every double bit error in a 1000-bit frame (payload + CRC) is detected,
/// checked exhaustively (1000 + 499 500 patterns per CRC). The property itself is common
/// practice: a CRC detects all double errors within the order of its generator (32 767 for
/// 0x1021 = (x+1)·primitive, far more for 0x04C11DB7), and P. Koopman's CRC tables give both
/// generators Hamming distance 4 at this length (the catalogue [CAT] has no Hamming-distance
/// data). The test is the proof for this length.
#[test]
fn every_single_and_double_error_in_1000_bits_is_detected() {
    const FRAME: usize = 1000;
    let mut rng = XorShift(0xDEAD_BEEF);
    type Check = fn(&[u8]) -> Result<bool, ProcessError>;
    type Append = fn(&mut [u8]) -> Result<(), ProcessError>;
    let cases: [(&str, Append, Check); 2] = [
        ("crc16", append_crc16_bits, check_crc16_bits),
        ("crc32", append_crc32_bits, check_crc32_bits),
    ];
    for (name, append, check) in cases {
        let mut frame = rng.bits(FRAME);
        append(&mut frame).unwrap();
        assert_eq!(check(&frame), Ok(true));
        for p in 0..FRAME {
            frame[p] ^= 1;
            assert_eq!(check(&frame), Ok(false), "{name}: single error at {p}");
            for q in p + 1..FRAME {
                frame[q] ^= 1;
                assert_eq!(check(&frame), Ok(false), "{name}: errors at {p}, {q}");
                frame[q] ^= 1;
            }
            frame[p] ^= 1;
        }
    }
}

#[test]
fn crc_input_errors() {
    let mut c = Crc16::new();
    assert_eq!(
        c.update_bits(&[0, 1, 2, 1]),
        Err(ProcessError::InvalidBit { index: 2 })
    );
    assert_eq!(c, Crc16::new(), "register unchanged after a rejected call");
    let mut c = Crc32::new();
    assert_eq!(
        c.update_bits(&[1, 255]),
        Err(ProcessError::InvalidBit { index: 1 })
    );
    assert_eq!(c, Crc32::new());
    assert_eq!(crc16_bits(&[3]), Err(ProcessError::InvalidBit { index: 0 }));
    let mut short = [0u8; 31];
    assert_eq!(
        append_crc32_bits(&mut short),
        Err(ProcessError::BufferLength {
            expected: 32,
            actual: 31
        })
    );
    assert_eq!(
        check_crc16_bits(&short[..15]),
        Err(ProcessError::BufferLength {
            expected: 16,
            actual: 15
        })
    );
    let mut bad = [0u8; 20];
    bad[1] = 7;
    let before = bad;
    assert_eq!(
        append_crc16_bits(&mut bad),
        Err(ProcessError::InvalidBit { index: 1 })
    );
    assert_eq!(bad, before, "nothing written on error");
    // An empty payload is fine: the CRC of nothing.
    let mut only_crc = [0u8; 16];
    append_crc16_bits(&mut only_crc).unwrap();
    assert_eq!(only_crc, [1u8; 16], "CRC-16 of nothing is 0xFFFF");
    assert_eq!(check_crc16_bits(&only_crc), Ok(true));
}

// ---------------------------------------------------------------------------------------------
// Interleaver
// ---------------------------------------------------------------------------------------------

/// [80211A] clause 17.3.5.6, both permutations, straight from the clause.
fn clause_17_3_5_6(n_cbps: usize, n_bpsc: usize, k: usize) -> usize {
    let s = (n_bpsc / 2).max(1);
    let i = (n_cbps / 16) * (k % 16) + k / 16;
    s * (i / s) + (i + n_cbps - (16 * i) / n_cbps) % s
}

#[test]
fn equals_the_standard_on_its_own_sizes() {
    // [80211A]: 48 data subcarriers, N_CBPS = 48·N_BPSC = 48, 96, 192, 288 for BPSK, QPSK,
    // 16-QAM, 64-QAM.
    for (m, n_cbps) in [
        (Modulation::Bpsk, 48),
        (Modulation::Qpsk, 96),
        (Modulation::Qam16, 192),
        (Modulation::Qam64, 288),
    ] {
        let il = Interleaver::new(48, m).unwrap();
        assert_eq!(il.coded_bits(), n_cbps);
        assert_eq!(il.columns(), 16);
        for k in 0..n_cbps {
            assert_eq!(
                il.index(k),
                clause_17_3_5_6(n_cbps, m.bits_per_symbol(), k),
                "{m:?} k {k}"
            );
        }
        // The same through the buffer path: a one-hot input lands where the clause says.
        let mut bits = vec![0u8; n_cbps];
        let mut out = vec![0u8; n_cbps];
        for k in [0, 1, 17, n_cbps - 1] {
            bits.fill(0);
            bits[k] = 1;
            il.interleave(&bits, &mut out).unwrap();
            let j = clause_17_3_5_6(n_cbps, m.bits_per_symbol(), k);
            assert_eq!(out.iter().position(|&b| b == 1), Some(j));
        }
    }
    // Other sizes where N_CBPS is a multiple of 16 and the clause's formula is itself a
    // permutation also agree (e.g. 64 and 96 bins, and 48 bins of 256-QAM).
    let mut compared = 0;
    for bins in [16, 32, 48, 64, 96, 192, 240] {
        for m in Modulation::ALL {
            let il = Interleaver::new(bins, m).unwrap();
            let n = il.coded_bits();
            let b = m.bits_per_symbol();
            let s = (b / 2).max(1);
            if !n.is_multiple_of(16) || !(n / 16).is_multiple_of(s) {
                continue;
            }
            for k in 0..n {
                assert_eq!(il.index(k), clause_17_3_5_6(n, b, k), "{bins} {m:?} {k}");
            }
            compared += 1;
        }
    }
    assert!(compared >= 25, "{compared}");
    // Why the second step is generalised per group of s: with 4 bins of 256-QAM (N = 32,
    // column length 2, s = 4) the clause's formula is not a permutation (positions 1, 7, 9, …
    // are hit twice), while ours is.
    let clause: std::collections::BTreeSet<usize> =
        (0..32).map(|k| clause_17_3_5_6(32, 8, k)).collect();
    assert!(clause.len() < 32);
    let il = Interleaver::new(4, Modulation::Qam256).unwrap();
    let ours: std::collections::BTreeSet<usize> = (0..32).map(|k| il.index(k)).collect();
    assert_eq!(ours.len(), 32);
}

#[test]
fn is_a_permutation_for_every_size_and_order() {
    // Every data-bin count 1..=1024 and every modulation: index() hits every position once,
    // the buffer path agrees with index(), and de-interleave ∘ interleave = identity.
    let mut seen = Vec::new();
    let mut rng = XorShift(99);
    for bins in 1..=1024 {
        for m in Modulation::ALL {
            let il = Interleaver::new(bins, m).unwrap();
            let n = il.coded_bits();
            assert_eq!(n, bins * m.bits_per_symbol());
            seen.clear();
            seen.resize(n, false);
            for k in 0..n {
                let j = il.index(k);
                assert!(j < n && !seen[j], "bins {bins} {m:?}: k {k} → {j}");
                seen[j] = true;
            }
            // Buffer path on an index-valued sequence: out[index(k)] = k, and back.
            let ks: Vec<u32> = (0..n as u32).collect();
            let mut inv = vec![0u32; n];
            il.deinterleave(&ks, &mut inv).unwrap();
            for (k, &v) in inv.iter().enumerate() {
                assert_eq!(v as usize, il.index(k));
            }
            let bits = rng.bits(n);
            let mut tx = vec![0u8; n];
            il.interleave(&bits, &mut tx).unwrap();
            for (k, &b) in bits.iter().enumerate() {
                assert_eq!(tx[il.index(k)], b);
            }
            let mut back = vec![0u8; n];
            il.deinterleave(&tx, &mut back).unwrap();
            assert_eq!(back, bits, "bins {bins} {m:?}");
        }
    }
}

#[test]
fn deinterleaves_i8_and_f32_llrs() {
    // The receiver's LLRs (positive = bit 0) follow their bits back into coded order.
    let il = Interleaver::new(41, Modulation::Qam16).unwrap(); // default numerology: 41 bins
    let n = il.coded_bits();
    let mut rng = XorShift(5);
    let bits = rng.bits(n);
    let mut tx = vec![0u8; n];
    il.interleave(&bits, &mut tx).unwrap();
    let llr_i8: Vec<i8> = tx.iter().map(|&b| if b == 0 { 90 } else { -90 }).collect();
    let llr_f32: Vec<f32> = tx
        .iter()
        .map(|&b| if b == 0 { 2.5 } else { -2.5 })
        .collect();
    let mut out_i8 = vec![0i8; n];
    let mut out_f32 = vec![0f32; n];
    il.deinterleave(&llr_i8, &mut out_i8).unwrap();
    il.deinterleave(&llr_f32, &mut out_f32).unwrap();
    for k in 0..n {
        assert_eq!(out_i8[k] < 0, bits[k] == 1);
        assert_eq!(out_f32[k] < 0.0, bits[k] == 1);
    }
}

/// Subcarrier (data-bin number) of coded bit `k`.
fn subcarrier(il: &Interleaver, k: usize) -> usize {
    il.index(k) / il.modulation().bits_per_symbol()
}

#[test]
fn adjacent_coded_bits_land_on_distant_subcarriers() {
    // Bound derived in the module docs from the construction: ⌊bins / C⌋ with C = min(16,
    // bins), for 3 or more bins (1 for 2 bins). Typical sizes first, with the bound stated.
    for (bins, bound) in [(48, 3), (52, 3), (200, 12), (234, 14), (41, 2)] {
        for m in Modulation::ALL {
            let il = Interleaver::new(bins, m).unwrap();
            assert_eq!(il.min_subcarrier_spread(), bound, "bins {bins}");
            let worst = (0..il.coded_bits() - 1)
                .map(|k| subcarrier(&il, k).abs_diff(subcarrier(&il, k + 1)))
                .min()
                .unwrap();
            assert!(worst >= bound, "bins {bins} {m:?}: {worst} < {bound}");
        }
    }
    // Then every size: the bound holds, and adjacent coded bits never share a subcarrier once
    // there are two or more bins.
    for bins in 2..=1024 {
        for m in Modulation::ALL {
            let il = Interleaver::new(bins, m).unwrap();
            let bound = il.min_subcarrier_spread();
            assert!(bound >= 1);
            assert_eq!(bound, if bins == 2 { 1 } else { bins / bins.min(16) });
            for k in 0..il.coded_bits() - 1 {
                let d = subcarrier(&il, k).abs_diff(subcarrier(&il, k + 1));
                assert!(d >= bound, "bins {bins} {m:?} k {k}: {d} < {bound}");
            }
        }
    }
}

#[test]
fn sized_by_the_numerology_and_validated() {
    let nu = Numerology::new(NumerologyParams::default()).unwrap();
    let il = Interleaver::for_symbol(&nu, 0, Modulation::Qpsk).unwrap();
    assert_eq!(il.data_bins(), nu.data_len(0));
    assert_eq!(il.coded_bits(), 2 * nu.data_len(0));
    assert_eq!(
        Interleaver::new(0, Modulation::Bpsk),
        Err(ConfigError::NoDataBins)
    );
    assert!(Interleaver::new(4097, Modulation::Bpsk).is_err());

    let il = Interleaver::new(10, Modulation::Qpsk).unwrap();
    let mut out = [9u8; 20];
    assert_eq!(
        il.interleave(&[0u8; 19], &mut out),
        Err(ProcessError::BufferLength {
            expected: 20,
            actual: 19
        })
    );
    assert_eq!(
        il.interleave(&[0u8; 20], &mut out[..18]),
        Err(ProcessError::BufferLength {
            expected: 20,
            actual: 18
        })
    );
    let mut bits = [0u8; 20];
    bits[4] = 2;
    assert_eq!(
        il.interleave(&bits, &mut out),
        Err(ProcessError::InvalidBit { index: 4 })
    );
    assert_eq!(out, [9u8; 20], "nothing written on error");
    let mut llr = [0i8; 21];
    assert_eq!(
        il.deinterleave(&[0i8; 20], &mut llr),
        Err(ProcessError::BufferLength {
            expected: 20,
            actual: 21
        })
    );
    assert_eq!(il.index(20), 20, "outside the domain: identity");
}
