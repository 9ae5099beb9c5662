//! The rate-1/2, constraint-length-7 convolutional code (generators 133 and 171 octal), its
//! punctured rates 2/3 and 3/4, and the encoder for terminated frames.
//!
//! This is the industry-standard code of IEEE Std 802.11a-1999, clause 17.3.5.5 (an open
//! standard): output **A** comes from generator `g0 = 133` (octal) and output **B** from
//! `g1 = 171`; the mother code emits `A1 B1 A2 B2 …` in that order.
//!
//! ## Shift-register convention
//!
//! The encoder state is the 6-bit word of the six previous input bits with the **newest bit as
//! the MSB** (bit 5) and the oldest as the LSB (bit 0), as drawn in the standard's figure.
//! For input bit `u` the 7-bit register is `r = (u << 6) | state`; the outputs are the parities
//! `A = parity(r & 0o133)`, `B = parity(r & 0o171)`; the next state is `r >> 1`. Reading a
//! generator MSB-first therefore gives the tap on the current input first:
//! `133 = 1 011 011` taps `u[n], u[n-2], u[n-3], u[n-5], u[n-6]`;
//! `171 = 1 111 001` taps `u[n], u[n-1], u[n-2], u[n-3], u[n-6]`.
//!
//! Both generators tap the current input and the oldest bit, so the two branches leaving a
//! state (input 0 or 1) carry complementary outputs, and so do the two branches entering a
//! state. The Viterbi decoder's butterfly relies on this ([`crate::viterbi`]).
//!
//! ## Terminated frames
//!
//! [`encode`] starts in state 0 and appends [`TAIL_BITS`] = 6 zero bits, so the encoder ends in
//! state 0. A frame of `n` information bits has `n + 6` trellis steps and `2(n + 6)` mother-code
//! bits before puncturing.
//!
//! ## Puncturing (IEEE 802.11a-1999 clause 17.3.5.5)
//!
//! The pattern repeats over `P` mother-code pairs; `keep` flags are listed per pair as (A, B):
//!
//! | rate | period P (pairs) | kept per period | transmitted order      | dropped  |
//! |------|------------------|-----------------|------------------------|----------|
//! | 1/2  | 1                | 2               | `A1 B1`                | —        |
//! | 2/3  | 2                | 3               | `A1 B1 A2`             | `B2`     |
//! | 3/4  | 3                | 4               | `A1 B1 A2 B3`          | `B2 A3`  |
//!
//! A frame whose pair count is not a multiple of `P` keeps the **prefix of the pattern** over
//! its last, partial period: [`coded_len`] counts the kept positions among the frame's
//! `2(n + 6)` mother-code bits.
//!
//! [`depuncture`] reinserts erasures (LLR 0, no belief) in the dropped positions so that a
//! rate-1/2 decoder can run unchanged. The streaming [`crate::viterbi::ViterbiDecoder`] instead
//! takes the rate at construction and depunctures internally with the same rule
//! ([`Depuncturer`]), so it accepts received LLRs in chunks of any size.

use crate::error::ProcessError;

/// Constraint length K (memory 6).
pub const CONSTRAINT_LENGTH: usize = 7;
/// Number of trellis states, `2^(K-1)`.
pub const STATES: usize = 64;
/// Generator of output A, octal 133 (IEEE 802.11a-1999 clause 17.3.5.5, `g0`).
pub const GENERATOR_A: u8 = 0o133;
/// Generator of output B, octal 171 (IEEE 802.11a-1999 clause 17.3.5.5, `g1`).
pub const GENERATOR_B: u8 = 0o171;
/// Zero bits appended by [`encode`] to return the encoder to state 0.
pub const TAIL_BITS: usize = 6;

/// Code rate after puncturing.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum CodeRate {
    /// Rate 1/2, the mother code (no puncturing).
    Half,
    /// Rate 2/3: of `A1 B1 A2 B2` keep `A1 B1 A2`.
    TwoThirds,
    /// Rate 3/4: of `A1 B1 A2 B2 A3 B3` keep `A1 B1 A2 B3`.
    ThreeQuarters,
}

/// Keep flags of one mother-code pair: `[keep A, keep B]`.
pub type PairKeep = [bool; 2];

const PATTERN_HALF: [PairKeep; 1] = [[true, true]];
const PATTERN_TWO_THIRDS: [PairKeep; 2] = [[true, true], [true, false]];
const PATTERN_THREE_QUARTERS: [PairKeep; 3] = [[true, true], [true, false], [false, true]];

impl CodeRate {
    /// Information bits per period (the `k` of rate `k/n`).
    pub const fn numerator(self) -> usize {
        match self {
            Self::Half => 1,
            Self::TwoThirds => 2,
            Self::ThreeQuarters => 3,
        }
    }

    /// Transmitted bits per period (the `n` of rate `k/n`).
    pub const fn denominator(self) -> usize {
        match self {
            Self::Half => 2,
            Self::TwoThirds => 3,
            Self::ThreeQuarters => 4,
        }
    }

    /// The puncturing pattern: one `[keep A, keep B]` entry per mother-code pair of a period
    /// (IEEE 802.11a-1999 clause 17.3.5.5). Its length is the period in pairs (= numerator).
    pub const fn puncture_pattern(self) -> &'static [PairKeep] {
        match self {
            Self::Half => &PATTERN_HALF,
            Self::TwoThirds => &PATTERN_TWO_THIRDS,
            Self::ThreeQuarters => &PATTERN_THREE_QUARTERS,
        }
    }
}

/// Parity (XOR of all bits) of a byte.
const fn parity(x: u8) -> u8 {
    (x.count_ones() & 1) as u8
}

/// The outputs `(A, B)` of the branch leaving `state` (6 bits, newest input at bit 5) on input
/// `bit` (0 or 1). Only the low bit of `bit` and the low 6 bits of `state` are used.
pub const fn branch_output(state: u8, bit: u8) -> (u8, u8) {
    let r = ((bit & 1) << 6) | (state & 0x3f);
    (parity(r & GENERATOR_A), parity(r & GENERATOR_B))
}

/// The state after `state` on input `bit`: the new bit enters at the MSB (bit 5).
pub const fn next_state(state: u8, bit: u8) -> u8 {
    (((bit & 1) << 6) | (state & 0x3f)) >> 1
}

/// Mother-code (rate-1/2) length of a terminated frame: `2 (info_bits + 6)`.
pub const fn mother_len(info_bits: usize) -> usize {
    2 * (info_bits + TAIL_BITS)
}

/// Transmitted length of a terminated frame of `info_bits` information bits at `rate`: the
/// number of kept positions among its `2 (info_bits + 6)` mother-code bits (a partial last
/// period keeps the pattern prefix).
pub fn coded_len(info_bits: usize, rate: CodeRate) -> usize {
    let pairs = info_bits + TAIL_BITS;
    let pattern = rate.puncture_pattern();
    let full = pairs / pattern.len();
    let rem = pairs % pattern.len();
    let partial: usize = pattern
        .iter()
        .take(rem)
        .map(|&[a, b]| usize::from(a) + usize::from(b))
        .sum();
    full * rate.denominator() + partial
}

/// Streaming rate-1/2 encoder: one input bit in, the pair `(A, B)` out. Starts in state 0.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct ConvEncoder {
    state: u8,
}

impl ConvEncoder {
    /// An encoder in state 0.
    pub const fn new() -> Self {
        Self { state: 0 }
    }

    /// Encodes one bit (only its low bit is used) and returns `(A, B)`.
    #[inline]
    pub fn push(&mut self, bit: u8) -> (u8, u8) {
        let out = branch_output(self.state, bit);
        self.state = next_state(self.state, bit);
        out
    }

    /// The current state (6 bits, newest input at bit 5).
    pub const fn state(&self) -> u8 {
        self.state
    }

    /// Returns to state 0.
    pub fn reset(&mut self) {
        self.state = 0;
    }
}

/// Encodes a terminated frame: `info` bits (one per byte, 0 or 1), then 6 zero tail bits,
/// punctured to `rate`. Writes [`coded_len`]`(info.len(), rate)` bits to the front of `out`
/// and returns that count.
///
/// Errors (nothing written): [`ProcessError::InvalidBit`] with the index of the first byte
/// that is not 0 or 1; [`ProcessError::BufferLength`] if `out` is shorter than the coded
/// length.
pub fn encode(info: &[u8], rate: CodeRate, out: &mut [u8]) -> Result<usize, ProcessError> {
    if let Some(index) = info.iter().position(|&b| b > 1) {
        return Err(ProcessError::InvalidBit { index });
    }
    let len = coded_len(info.len(), rate);
    if out.len() < len {
        return Err(ProcessError::BufferLength {
            expected: len,
            actual: out.len(),
        });
    }
    let pattern = rate.puncture_pattern();
    let mut enc = ConvEncoder::new();
    let mut slots = out.iter_mut();
    let tail = [0u8; TAIL_BITS];
    for (&bit, keep) in info.iter().chain(tail.iter()).zip(pattern.iter().cycle()) {
        let (a, b) = enc.push(bit);
        for (k, v) in keep.iter().zip([a, b]) {
            if *k {
                if let Some(slot) = slots.next() {
                    *slot = v;
                }
            }
        }
    }
    Ok(len)
}

/// What one received LLR does in the depuncturing phase machine.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Role {
    /// The A of a pair whose B will be received: hold it.
    A,
    /// The B of a pair whose A was held: the pair is complete.
    B,
    /// The A of a pair whose B is dropped: complete the pair with an erased B.
    AErasedB,
    /// The B of a pair whose A is dropped: complete the pair with an erased A.
    ErasedAB,
}

const ROLES_HALF: [Role; 2] = [Role::A, Role::B];
const ROLES_TWO_THIRDS: [Role; 3] = [Role::A, Role::B, Role::AErasedB];
const ROLES_THREE_QUARTERS: [Role; 4] = [Role::A, Role::B, Role::AErasedB, Role::ErasedAB];

const fn roles(rate: CodeRate) -> &'static [Role] {
    match rate {
        CodeRate::Half => &ROLES_HALF,
        CodeRate::TwoThirds => &ROLES_TWO_THIRDS,
        CodeRate::ThreeQuarters => &ROLES_THREE_QUARTERS,
    }
}

/// Streaming depuncturer: received (punctured) LLRs in, complete rate-1/2 pairs `(L_A, L_B)`
/// out, with 0 (erasure) in the dropped positions.
///
/// Each received LLR completes at most one pair. A dropped B is filled as soon as its A has
/// arrived; a dropped A is filled when the B of the same pair arrives. A correctly sized
/// frame ([`coded_len`]) therefore always ends on a pair boundary.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Depuncturer {
    rate: CodeRate,
    /// Index of the next received LLR within the period, `< rate.denominator()`.
    phase: usize,
    /// The held A of an incomplete pair.
    held: i8,
}

impl Depuncturer {
    /// A depuncturer at the start of a frame.
    pub const fn new(rate: CodeRate) -> Self {
        Self {
            rate,
            phase: 0,
            held: 0,
        }
    }

    /// The code rate.
    pub const fn rate(&self) -> CodeRate {
        self.rate
    }

    /// Back to the start of a frame.
    pub fn reset(&mut self) {
        self.phase = 0;
        self.held = 0;
    }

    /// True when an A has been received and its pair is not complete yet.
    pub fn has_half_pair(&self) -> bool {
        roles(self.rate)
            .get(self.phase.wrapping_sub(1))
            .is_some_and(|&r| r == Role::A)
    }

    /// The held A of an incomplete pair (0 if none).
    pub const fn held(&self) -> i8 {
        self.held
    }

    /// Feeds one received LLR; returns the pair it completes, if any.
    #[inline]
    pub fn push(&mut self, llr: i8) -> Option<(i8, i8)> {
        let rs = roles(self.rate);
        let role = rs.get(self.phase).copied().unwrap_or(Role::B);
        self.phase += 1;
        if self.phase >= rs.len() {
            self.phase = 0;
        }
        match role {
            Role::A => {
                self.held = llr;
                None
            }
            Role::B => Some((core::mem::take(&mut self.held), llr)),
            Role::AErasedB => Some((llr, 0)),
            Role::ErasedAB => Some((0, llr)),
        }
    }

    /// How many pairs `n` further received LLRs would complete (no state change).
    pub fn pairs_for(&self, n: usize) -> usize {
        let rs = roles(self.rate);
        let per_period = self.rate.denominator();
        let pairs_per_period = self.rate.numerator();
        let full = n / per_period;
        let rem = n % per_period;
        let partial = rs
            .iter()
            .cycle()
            .skip(self.phase)
            .take(rem)
            .filter(|&&r| r != Role::A)
            .count();
        full * pairs_per_period + partial
    }
}

/// Depunctures the received LLRs of one frame (or of a stream starting at a period boundary):
/// writes rate-1/2 pairs `L_A, L_B, …` with 0 in the dropped positions and returns the number
/// of values written (twice the pair count). A trailing A without its B (a truncated frame)
/// is completed with an erased B.
///
/// Error (nothing written): [`ProcessError::BufferLength`] if `out` is too short.
pub fn depuncture(llrs: &[i8], rate: CodeRate, out: &mut [i8]) -> Result<usize, ProcessError> {
    let mut d = Depuncturer::new(rate);
    let pairs = d.pairs_for(llrs.len());
    // A trailing half pair (only a truncated frame has one) is completed with an erasure.
    let trailing = usize::from(Depuncturer::new(rate).pairs_after_half(llrs.len()));
    let len = 2 * (pairs + trailing);
    if out.len() < len {
        return Err(ProcessError::BufferLength {
            expected: len,
            actual: out.len(),
        });
    }
    let mut slots = out.iter_mut();
    let mut put = |a: i8, b: i8| {
        if let Some(s) = slots.next() {
            *s = a;
        }
        if let Some(s) = slots.next() {
            *s = b;
        }
    };
    for &l in llrs {
        if let Some((a, b)) = d.push(l) {
            put(a, b);
        }
    }
    if d.has_half_pair() {
        put(d.held(), 0);
    }
    Ok(len)
}

impl Depuncturer {
    /// True if `n` received LLRs from this state would end with a half pair.
    fn pairs_after_half(&self, n: usize) -> bool {
        let rs = roles(self.rate);
        n > 0
            && (self.phase + n - 1)
                .checked_rem(rs.len())
                .and_then(|last| rs.get(last))
                .is_some_and(|&r| r == Role::A)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn outputs_complement_as_the_butterfly_assumes() {
        for s in 0..64u8 {
            let (a0, b0) = branch_output(s, 0);
            let (a1, b1) = branch_output(s, 1);
            assert_eq!((a0 ^ 1, b0 ^ 1), (a1, b1));
            let (c0, d0) = branch_output(s ^ 1, 0);
            assert_eq!((a0 ^ 1, b0 ^ 1), (c0, d0));
        }
    }

    #[test]
    fn depuncture_counts() {
        for rate in [CodeRate::Half, CodeRate::TwoThirds, CodeRate::ThreeQuarters] {
            for n in 0..40 {
                let len = coded_len(n, rate);
                let d = Depuncturer::new(rate);
                assert_eq!(d.pairs_for(len), n + TAIL_BITS);
                assert!(!d.pairs_after_half(len));
            }
        }
    }
}
