//! Packets through the coding chain without the radio: payload → CRC-32 → code → per-symbol
//! interleaver → LLRs → de-interleaver → Viterbi → CRC check.

use flatbin::conv_code::{coded_len, CodeRate};
use flatbin::packet::{PacketDecoder, PacketFormat, PacketStatus};
use flatbin::{Modulation, Numerology, NumerologyParams, ProcessError};

const D: usize = flatbin::viterbi::RECOMMENDED_DEPTH;

fn nu() -> Numerology {
    Numerology::new(NumerologyParams::default()).expect("default numerology")
}

/// xorshift64* (Vigna 2016): test data only.
struct Rng(u64);
impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_f491_4f6c_dd1d)
    }
    fn bit(&mut self) -> u8 {
        (self.next() >> 63) as u8
    }
}

/// Sends one packet; `flip` wrong-signs that many LLRs per symbol at pseudo-random places.
fn send(f: &PacketFormat, rng: &mut Rng, flip: usize) -> (Vec<u8>, Vec<Vec<i8>>) {
    let mut packet = vec![0u8; f.info_bits()];
    for b in packet.iter_mut().take(f.payload_bits()) {
        *b = rng.bit();
    }
    let mut coded = vec![0u8; f.coded_bits()];
    f.encode(&mut packet, &mut coded).expect("encode");
    let mut symbols = Vec::new();
    for s in 0..f.symbols() {
        let n = f.symbol_bits(s);
        let (mut scratch, mut out) = (vec![0u8; n], vec![0u8; n]);
        assert_eq!(f.symbol_bits_out(s, &coded, &mut scratch, &mut out), Ok(n));
        let mut llr: Vec<i8> = out.iter().map(|&b| if b == 0 { 40 } else { -40 }).collect();
        for _ in 0..flip {
            let i = (rng.next() % n as u64) as usize;
            llr[i] = -llr[i] / 4;
        }
        symbols.push(llr);
    }
    (packet, symbols)
}

fn receive(f: &PacketFormat, dec: &mut PacketDecoder<D>, symbols: &[Vec<i8>]) -> (Vec<u8>, bool) {
    let mut out = vec![0u8; f.info_bits()];
    let mut scratch = vec![0i8; 8 * 64];
    let mut verdict = None;
    for (s, llr) in symbols.iter().enumerate() {
        match dec
            .push_symbol(s as u32, llr, &mut scratch, &mut out)
            .expect("push")
        {
            PacketStatus::Pending => assert!(s + 1 < symbols.len()),
            PacketStatus::Complete { crc_ok } => {
                assert_eq!(s + 1, symbols.len());
                verdict = Some(crc_ok);
            }
        }
    }
    (out, verdict.expect("complete after the last symbol"))
}

#[test]
fn layout_follows_from_the_code_and_the_numerology() {
    // Symbols per packet = ceil(coded bits / coded bits per symbol) for the default comb
    // (every symbol has the same data bins); coded bits = kept positions of 2(n + 6) for
    // n = payload + 32 (IEEE 802.11a clause 17.3.5.5 puncturing; CRC-32 per the catalogue).
    let nu = nu();
    for m in Modulation::ALL {
        for r in [CodeRate::Half, CodeRate::TwoThirds, CodeRate::ThreeQuarters] {
            for payload in [1usize, 8, 256, 1000] {
                let f = PacketFormat::new(&nu, m, r, payload).expect("format");
                let n = payload + 32;
                let pairs = n + 6;
                let kept = match r {
                    CodeRate::Half => 2 * pairs,
                    CodeRate::TwoThirds => 3 * (pairs / 2) + [0, 2][pairs % 2],
                    CodeRate::ThreeQuarters => 4 * (pairs / 3) + [0, 2, 3][pairs % 3],
                };
                assert_eq!(f.coded_bits(), kept);
                assert_eq!(kept, coded_len(n, r));
                let per = nu.data_len(0) * m.bits_per_symbol();
                assert_eq!(
                    f.symbols() as usize,
                    kept.div_ceil(per),
                    "{m:?} {r:?} {payload}"
                );
            }
        }
    }
}

#[test]
fn clean_and_lightly_damaged_packets_decode_with_a_good_crc() {
    // The code corrects sparse errors (d_free = 10: Proakis & Salehi table of rate-1/2
    // codes); after interleaving, two weakened wrong signs per symbol are sparse.
    let nu = nu();
    let mut rng = Rng(0x1234_5678_9abc_def1);
    for m in Modulation::ALL {
        for r in [CodeRate::Half, CodeRate::TwoThirds, CodeRate::ThreeQuarters] {
            let f = PacketFormat::new(&nu, m, r, 256).expect("format");
            let mut dec = PacketDecoder::<D>::new(f);
            for flip in [0, 2] {
                let (sent, symbols) = send(&f, &mut rng, flip);
                let (got, crc_ok) = receive(&f, &mut dec, &symbols);
                assert_eq!(got, sent, "{m:?} {r:?} flip {flip}");
                assert!(crc_ok);
            }
        }
    }
}

#[test]
fn a_destroyed_packet_fails_its_crc() {
    // Half the LLRs of every symbol wrong: the decoded bits are garbage and the CRC-32 must
    // say so (an undetected error has probability about 2^-32: common practice).
    let nu = nu();
    let f = PacketFormat::new(&nu, Modulation::Qpsk, CodeRate::Half, 256).expect("format");
    let mut dec = PacketDecoder::<D>::new(f);
    let mut rng = Rng(77);
    for _ in 0..20 {
        let (sent, mut symbols) = send(&f, &mut rng, 0);
        for s in symbols.iter_mut() {
            for v in s.iter_mut() {
                if rng.bit() == 1 {
                    *v = -*v;
                }
            }
        }
        let (got, crc_ok) = receive(&f, &mut dec, &symbols);
        assert_ne!(got, sent);
        assert!(!crc_ok);
    }
}

#[test]
fn bad_calls_are_refused_without_losing_the_packet() {
    let nu = nu();
    assert!(PacketFormat::new(&nu, Modulation::Qpsk, CodeRate::Half, 0).is_err());
    assert!(PacketFormat::new(&nu, Modulation::Bpsk, CodeRate::Half, 1 << 24).is_err());
    let f = PacketFormat::new(&nu, Modulation::Qpsk, CodeRate::Half, 100).expect("format");
    let mut dec = PacketDecoder::<D>::new(f);
    let mut rng = Rng(5);
    let (sent, symbols) = send(&f, &mut rng, 0);
    let mut out = vec![0u8; f.info_bits()];
    let mut scratch = vec![0i8; 512];
    // Out of order, short LLRs, short packet buffer: refused, and the packet still decodes.
    assert_eq!(
        dec.push_symbol(1, &symbols[1], &mut scratch, &mut out),
        Err(ProcessError::OutOfRange { index: 0 })
    );
    assert!(dec
        .push_symbol(0, &symbols[0][..3], &mut scratch, &mut out)
        .is_err());
    assert!(dec
        .push_symbol(0, &symbols[0], &mut scratch, &mut out[..10])
        .is_err());
    let (got, crc_ok) = receive(&f, &mut dec, &symbols);
    assert_eq!(got, sent);
    assert!(crc_ok);
}
