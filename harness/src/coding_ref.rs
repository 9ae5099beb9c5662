//! A plain reference for the convolutional code, independent of the core: an encoder written
//! from the generator polynomials and a floating-point Viterbi decoder that keeps every
//! survivor of the frame and traces back once from state 0 (exact maximum likelihood for a
//! terminated frame; no window, no quantisation, no saturation).
//!
//! It measures what the core's fixed-point, sliding-window decoder loses: the i8 LLR
//! quantisation and the finite traceback. Std only; frame-length memory (64 bytes per step).

use crate::theory::conv_code::{PuncturePattern, GENERATOR_A, GENERATOR_B, MEMORY};

/// Tail bits of a terminated frame (the code's memory).
pub const TAIL: usize = MEMORY as usize;

fn parity(x: u32) -> u8 {
    (x.count_ones() & 1) as u8
}

/// Encodes `info` (one bit per byte) with 6 zero tail bits and punctures with `pattern`
/// (applied from the first input bit, the tail included). Output: the sent bits in order,
/// A before B for each input bit.
pub fn encode(info: &[u8], pattern: PuncturePattern) -> Vec<u8> {
    let mut out = Vec::with_capacity(2 * (info.len() + TAIL));
    let mut state = 0u32;
    for (t, &b) in info.iter().chain([0u8; TAIL].iter()).enumerate() {
        let reg = (u32::from(b & 1) << MEMORY) | state;
        let keep = pattern[t % pattern.len()];
        if keep.0 {
            out.push(parity(reg & GENERATOR_A));
        }
        if keep.1 {
            out.push(parity(reg & GENERATOR_B));
        }
        state = reg >> 1;
    }
    out
}

/// Number of sent bits for `info_bits` information bits under `pattern`.
pub fn coded_len(info_bits: usize, pattern: PuncturePattern) -> usize {
    (0..info_bits + TAIL)
        .map(|t| {
            let k = pattern[t % pattern.len()];
            usize::from(k.0) + usize::from(k.1)
        })
        .sum()
}

/// Maximum-likelihood decoding of a terminated, punctured frame of `info_bits` bits from
/// LLRs of the sent bits (`L = ln P(0)/P(1)`, any scale). Returns the information bits, or
/// `None` when `llrs` has the wrong length.
pub fn decode(llrs: &[f64], info_bits: usize, pattern: PuncturePattern) -> Option<Vec<u8>> {
    if llrs.len() != coded_len(info_bits, pattern) {
        return None;
    }
    let steps = info_bits + TAIL;
    let states = 1usize << MEMORY;
    let mut metric = vec![f64::NEG_INFINITY; states];
    metric[0] = 0.0;
    // Survivor: the predecessor's dropped (oldest) bit per state and step.
    let mut from = vec![0u8; steps * states];
    let mut pos = 0usize;
    let mut next = vec![f64::NEG_INFINITY; states];
    for t in 0..steps {
        let keep = pattern[t % pattern.len()];
        let la = if keep.0 {
            pos += 1;
            llrs[pos - 1]
        } else {
            0.0
        };
        let lb = if keep.1 {
            pos += 1;
            llrs[pos - 1]
        } else {
            0.0
        };
        next.fill(f64::NEG_INFINITY);
        for (s, &m) in metric.iter().enumerate() {
            if m == f64::NEG_INFINITY {
                continue;
            }
            let tail = t >= info_bits;
            for bit in 0..2u32 {
                if tail && bit == 1 {
                    continue;
                }
                let reg = (bit << MEMORY) | s as u32;
                let sa = if parity(reg & GENERATOR_A) == 0 {
                    1.0
                } else {
                    -1.0
                };
                let sb = if parity(reg & GENERATOR_B) == 0 {
                    1.0
                } else {
                    -1.0
                };
                let ns = (reg >> 1) as usize;
                let cand = m + 0.5 * (sa * la + sb * lb);
                if cand > next[ns] {
                    next[ns] = cand;
                    from[t * states + ns] = (s & 1) as u8;
                }
            }
        }
        std::mem::swap(&mut metric, &mut next);
    }
    // Trace back from state 0: the input of step t is the newest bit of the state after it.
    let mut bits = vec![0u8; steps];
    let mut s = 0usize;
    for t in (0..steps).rev() {
        bits[t] = ((s >> (MEMORY - 1)) & 1) as u8;
        let oldest = usize::from(from[t * states + s]);
        s = ((s << 1) & (states - 1)) | oldest;
    }
    bits.truncate(info_bits);
    Some(bits)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::theory::conv_code::{RATE_1_2, RATE_2_3, RATE_3_4};

    #[test]
    fn impulse_response_is_the_generators() {
        // A single 1 through the rate-1/2 encoder: output A over 7 steps reads the taps of
        // 133 octal (1011011) and B those of 171 (1111001), newest tap first (IEEE 802.11a
        // clause 17.3.5.5: the generator polynomials).
        let out = encode(&[1], RATE_1_2);
        let a: Vec<u8> = out.iter().step_by(2).copied().collect();
        let b: Vec<u8> = out.iter().skip(1).step_by(2).copied().collect();
        assert_eq!(a, [1, 0, 1, 1, 0, 1, 1]);
        assert_eq!(b, [1, 1, 1, 1, 0, 0, 1]);
    }

    #[test]
    fn noiseless_round_trip_every_rate() {
        // Maximum likelihood on error-free LLRs returns the input (definition of decoding).
        let info: Vec<u8> = (0..97u32).map(|i| ((i * 7 + i / 3) % 2) as u8).collect();
        for p in [RATE_1_2, RATE_2_3, RATE_3_4] {
            let llrs: Vec<f64> = encode(&info, p)
                .iter()
                .map(|&c| if c == 0 { 4.0 } else { -4.0 })
                .collect();
            assert_eq!(decode(&llrs, info.len(), p).as_deref(), Some(&info[..]));
        }
    }
}
