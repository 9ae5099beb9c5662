//! Packets over OFDM symbols: payload bits + CRC-32 → convolutional code → one interleaver per
//! symbol on the transmit side, and the inverse on i8 LLRs — de-interleaver → Viterbi → CRC —
//! as the receiver hands over symbols.
//!
//! A packet of `P` payload bits carries `P + 32` information bits (CRC-32/ISO-HDLC appended,
//! [`crate::crc::append_crc32_bits`]), encoded at the code rate with 6 tail bits
//! ([`crate::conv_code::encode`]) and spread over the data bins of symbols `0, 1, …` of a
//! frame, each symbol's share interleaved on its own ([`crate::interleave::Interleaver`]).
//! The last symbol is filled up with zero bits that the decoder skips.
//!
//! [`PacketDecoder`] keeps no packet-sized buffer of LLRs: each symbol's LLRs are
//! de-interleaved into a caller scratch buffer of one symbol and go straight into the
//! streaming Viterbi decoder, whose decided bits land in the caller's packet buffer
//! (`P + 32` bytes, one bit per byte). Its state is the decoder's (`16·D + 512` bytes).

use crate::conv_code::{coded_len, encode, CodeRate};
use crate::crc::{append_crc32_bits, check_crc32_bits, CRC32_BITS};
use crate::error::{ConfigError, ProcessError};
use crate::interleave::Interleaver;
use crate::modulation::Modulation;
use crate::numerology::Numerology;
use crate::viterbi::{Decision, ViterbiDecoder};

/// Most OFDM symbols a packet may span.
pub const MAX_PACKET_SYMBOLS: u32 = 4096;

/// The layout of one packet on a numerology: modulation, code rate, payload length, and the
/// symbol count that follows from them.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct PacketFormat {
    numerology: Numerology,
    modulation: Modulation,
    rate: CodeRate,
    payload_bits: usize,
    coded_bits: usize,
    symbols: u32,
}

impl PacketFormat {
    /// The format of packets of `payload_bits` bits (≥ 1).
    ///
    /// Errors: [`ConfigError::CapacityTooSmall`] for an empty payload (`needed` 1, `capacity`
    /// 0) or a packet that needs more than [`MAX_PACKET_SYMBOLS`] symbols (`needed` its coded
    /// bits, `capacity` what that many symbols carry).
    pub fn new(
        numerology: &Numerology,
        modulation: Modulation,
        rate: CodeRate,
        payload_bits: usize,
    ) -> Result<Self, ConfigError> {
        if payload_bits == 0 {
            return Err(ConfigError::CapacityTooSmall {
                needed: 1,
                capacity: 0,
            });
        }
        let info = payload_bits.saturating_add(CRC32_BITS);
        let coded_bits = coded_len(info, rate);
        let bps = modulation.bits_per_symbol();
        let mut capacity = 0usize;
        let mut symbols = 0u32;
        while capacity < coded_bits {
            if symbols >= MAX_PACKET_SYMBOLS {
                return Err(ConfigError::CapacityTooSmall {
                    needed: coded_bits,
                    capacity,
                });
            }
            capacity = capacity.saturating_add(numerology.data_len(symbols).saturating_mul(bps));
            symbols += 1;
        }
        Ok(Self {
            numerology: *numerology,
            modulation,
            rate,
            payload_bits,
            coded_bits,
            symbols,
        })
    }

    /// Data modulation.
    pub fn modulation(&self) -> Modulation {
        self.modulation
    }
    /// Code rate.
    pub fn rate(&self) -> CodeRate {
        self.rate
    }
    /// Payload bits per packet.
    pub fn payload_bits(&self) -> usize {
        self.payload_bits
    }
    /// Information bits per packet: payload + 32 CRC bits (the length of the packet buffers).
    pub fn info_bits(&self) -> usize {
        self.payload_bits + CRC32_BITS
    }
    /// Coded bits per packet (after tail and puncturing).
    pub fn coded_bits(&self) -> usize {
        self.coded_bits
    }
    /// OFDM symbols per packet.
    pub fn symbols(&self) -> u32 {
        self.symbols
    }
    /// Coded bits carried by symbol `symbol` of the frame (data bins × bits per subcarrier).
    pub fn symbol_bits(&self, symbol: u32) -> usize {
        self.numerology.data_len(symbol) * self.modulation.bits_per_symbol()
    }
    /// Coded bits of the packet that precede symbol `symbol` (capped at the packet's).
    fn offset(&self, symbol: u32) -> usize {
        let mut o = 0usize;
        for s in 0..symbol.min(self.symbols) {
            o = o.saturating_add(self.symbol_bits(s));
        }
        o.min(self.coded_bits)
    }
    /// The interleaver of symbol `symbol`.
    fn interleaver(&self, symbol: u32) -> Result<Interleaver, ProcessError> {
        Interleaver::for_symbol(&self.numerology, symbol, self.modulation)
            .map_err(|_| ProcessError::OutOfRange { index: 0 })
    }

    /// Transmit side: appends the CRC-32 to `packet` (its first [`Self::payload_bits`] bits
    /// are the payload; [`Self::info_bits`] long) and encodes it into `coded`
    /// ([`Self::coded_bits`] long or more).
    ///
    /// Errors: wrong buffer lengths, a payload value other than 0/1.
    pub fn encode(&self, packet: &mut [u8], coded: &mut [u8]) -> Result<(), ProcessError> {
        if packet.len() != self.info_bits() {
            return Err(ProcessError::BufferLength {
                expected: self.info_bits(),
                actual: packet.len(),
            });
        }
        append_crc32_bits(packet)?;
        let n = encode(packet, self.rate, coded)?;
        if n == self.coded_bits {
            Ok(())
        } else {
            Err(ProcessError::BufferLength {
                expected: self.coded_bits,
                actual: n,
            })
        }
    }

    /// Transmit side: the interleaved bits of symbol `symbol` (`< symbols()`) from the coded
    /// packet, zero-filled past its end, into `out` (at least [`Self::symbol_bits`] long;
    /// returns that count). `scratch` holds the symbol's bits before interleaving (as long).
    pub fn symbol_bits_out(
        &self,
        symbol: u32,
        coded: &[u8],
        scratch: &mut [u8],
        out: &mut [u8],
    ) -> Result<usize, ProcessError> {
        if symbol >= self.symbols {
            return Err(ProcessError::OutOfRange { index: 0 });
        }
        if coded.len() < self.coded_bits {
            return Err(ProcessError::BufferLength {
                expected: self.coded_bits,
                actual: coded.len(),
            });
        }
        let n = self.symbol_bits(symbol);
        let (Some(src), Some(dst)) = (scratch.get_mut(..n), out.get_mut(..n)) else {
            return Err(ProcessError::BufferLength {
                expected: n,
                actual: scratch.len().min(out.len()),
            });
        };
        let o = self.offset(symbol);
        for (i, b) in src.iter_mut().enumerate() {
            *b = coded
                .get(o + i)
                .copied()
                .filter(|_| o + i < self.coded_bits)
                .unwrap_or(0);
        }
        self.interleaver(symbol)?.interleave(src, dst)?;
        Ok(n)
    }
}

/// Where a packet's reception stands after a symbol.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum PacketStatus {
    /// More symbols to come.
    Pending,
    /// The packet is decoded into the caller's buffer; `crc_ok` says whether its CRC-32
    /// checked.
    Complete {
        /// The CRC-32 over the decoded information bits checked.
        crc_ok: bool,
    },
}

/// Receive side: i8 LLRs of a packet's symbols in, decoded packet bits out.
#[derive(Clone, Debug)]
pub struct PacketDecoder<const D: usize> {
    format: PacketFormat,
    viterbi: ViterbiDecoder<D>,
    next_symbol: u32,
    /// Coded bits of the packet taken so far (the next symbol's offset into the packet).
    consumed: usize,
    written: usize,
}

impl<const D: usize> PacketDecoder<D> {
    /// A decoder for `format` (soft decisions), waiting for symbol 0.
    pub fn new(format: PacketFormat) -> Self {
        Self {
            format,
            viterbi: ViterbiDecoder::new(format.rate, Decision::Soft),
            next_symbol: 0,
            consumed: 0,
            written: 0,
        }
    }

    /// The packet format.
    pub fn format(&self) -> &PacketFormat {
        &self.format
    }

    /// Forgets the packet in progress (the next symbol is symbol 0 again).
    pub fn reset(&mut self) {
        self.viterbi.reset();
        self.next_symbol = 0;
        self.consumed = 0;
        self.written = 0;
    }

    /// The symbol the decoder expects next.
    pub fn next_symbol(&self) -> u32 {
        self.next_symbol
    }

    /// Takes the LLRs of symbol `symbol` (the receiver's order: bits of each data bin in
    /// ascending frequency; at least [`PacketFormat::symbol_bits`] of them), de-interleaves
    /// them through `scratch` (as long) and decodes into `packet` ([`PacketFormat::info_bits`]
    /// long, one bit per byte, filled as the decoder decides). After the packet's last symbol
    /// the packet is complete, its CRC checked, and the decoder ready for the next packet.
    ///
    /// Errors (nothing changed): a symbol out of order ([`ProcessError::OutOfRange`] with the
    /// expected index), buffers too short.
    pub fn push_symbol(
        &mut self,
        symbol: u32,
        llrs: &[i8],
        scratch: &mut [i8],
        packet: &mut [u8],
    ) -> Result<PacketStatus, ProcessError> {
        if symbol != self.next_symbol || symbol >= self.format.symbols {
            return Err(ProcessError::OutOfRange {
                index: self.next_symbol as usize,
            });
        }
        let info = self.format.info_bits();
        if packet.len() < info {
            return Err(ProcessError::BufferLength {
                expected: info,
                actual: packet.len(),
            });
        }
        let n = self.format.symbol_bits(symbol);
        let (Some(src), Some(dst)) = (llrs.get(..n), scratch.get_mut(..n)) else {
            return Err(ProcessError::BufferLength {
                expected: n,
                actual: llrs.len().min(scratch.len()),
            });
        };
        let il = self.format.interleaver(symbol)?;
        il.deinterleave(src, dst)?;
        let take = self.format.coded_bits.saturating_sub(self.consumed).min(n);
        let out = packet.get_mut(self.written..).unwrap_or_default();
        // The decoder never writes past the packet: it holds back 2·D steps and the tail.
        let w = self
            .viterbi
            .decode(dst.get(..take).unwrap_or_default(), out)?;
        self.written += w;
        self.consumed += take;
        self.next_symbol += 1;
        if self.next_symbol < self.format.symbols {
            return Ok(PacketStatus::Pending);
        }
        let out = packet.get_mut(self.written..).unwrap_or_default();
        let w = self.viterbi.finish(out)?;
        self.written += w;
        let complete = self.written == info;
        let crc_ok = complete && check_crc32_bits(packet.get(..info).unwrap_or_default())?;
        self.next_symbol = 0;
        self.consumed = 0;
        self.written = 0;
        Ok(PacketStatus::Complete { crc_ok })
    }
}
