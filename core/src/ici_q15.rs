//! Predicted ICI with no floating point at run time, for the integer (Cortex-M0) path.
//!
//! [`IciTableQ15::new`] tabulates, at configuration time (f32, on the host or an FPU), the exact
//! Doppler ICI of the classical spectrum (Russell & Stüber sum, [`crate::ici::doppler_ici`]) and
//! the exact CFO ICI `1 − |S0|²` (Moose, [`crate::ici::cfo_ici`]) for one FFT size, each divided
//! by the square of its argument: `g_D(x) = P_D(x)/x²` and `g_C(ε) = P_C(ε)/ε²` are smooth and
//! nearly constant (`(2π)²/24` and `π²/3` at small arguments; REFERENCES items 1 and 2), so
//! linear interpolation of `g` keeps a small relative error even where `P` itself is tiny.
//! At run time a prediction is two table look-ups, two products and one integer log.
//!
//! Doppler and CFO are combined by adding their ICI powers, where the exact joint sum
//! ([`crate::ici::joint_ici`]) needs O(N) work: for total ICI up to −10 dB the SIR from the
//! sum is within 0.25 dB of the joint one (measured over fd·T 0.01–0.2 and ε 0–0.1 in
//! `tests/ici_q15.rs`: 0.248 dB at worst).

use crate::error::ProcessError;
use crate::fixed_math::{ratio_db_q8, shift_round};
use crate::ici::{cfo_ici, doppler_ici};

/// Table points per quantity.
pub const ICI_POINTS: usize = 65;
/// Largest `fd·T` tabulated, Q16 (0.32 = 20 972 / 65 536, beyond the Doppler estimator's valid
/// range of fd·T ≈ 0.23).
pub const MAX_FD_T_Q16: u32 = 20_972;
/// Largest `|ε|` tabulated, Q16 (0.5 subcarrier).
pub const MAX_EPS_Q16: u32 = 32_768;

/// Fraction bits of the tabulated `g` values.
const G_FRAC: i32 = 28;

/// The two tables for one FFT size.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct IciTableQ15 {
    /// `g_D` at `fd·T = i·MAX_FD_T/(POINTS − 1)`, Q28.
    doppler: [u32; ICI_POINTS],
    /// `g_C` at `ε = i·MAX_EPS/(POINTS − 1)`, Q28.
    cfo: [u32; ICI_POINTS],
}

/// An integer ICI prediction (powers as fractions of the received power, Q32).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct IciPredictionQ15 {
    /// Doppler ICI, Q32.
    pub doppler_q32: u32,
    /// CFO ICI, Q32.
    pub cfo_q32: u32,
    /// Their sum (saturating), Q32.
    pub ici_q32: u32,
    /// Signal-to-ICI ratio `(1 − ici)/ici`, dB Q8 (saturated at 127.99 dB; 0 ICI gives the
    /// saturated value).
    pub sir_db_q8: i16,
}

impl IciTableQ15 {
    /// Tabulates for FFT size `fft_len` (configuration time; f32 through [`crate::ici`]).
    /// Errors: `fft_len` outside what [`crate::ici`] accepts.
    pub fn new(fft_len: usize) -> Result<Self, ProcessError> {
        let mut doppler = [0u32; ICI_POINTS];
        let mut cfo = [0u32; ICI_POINTS];
        let step_d = MAX_FD_T_Q16 as f32 / 65536.0 / (ICI_POINTS - 1) as f32;
        let step_c = MAX_EPS_Q16 as f32 / 65536.0 / (ICI_POINTS - 1) as f32;
        let scale = (1u64 << G_FRAC) as f32;
        for i in 0..ICI_POINTS {
            // At 0 the ratio's limit, taken a tenth of a step away.
            let x = step_d * if i == 0 { 0.1 } else { i as f32 };
            let e = step_c * if i == 0 { 0.1 } else { i as f32 };
            let gd = doppler_ici(x, fft_len)? / (x * x);
            let gc = cfo_ici(e, fft_len)? / (e * e);
            if let (Some(d), Some(c)) = (doppler.get_mut(i), cfo.get_mut(i)) {
                *d = (gd * scale + 0.5) as u32;
                *c = (gc * scale + 0.5) as u32;
            }
        }
        Ok(Self { doppler, cfo })
    }

    /// Doppler ICI at `fd·T` (Q16, saturated to the table's range), Q32.
    pub fn doppler_q32(&self, fd_t_q16: u32) -> u32 {
        lookup(&self.doppler, fd_t_q16.min(MAX_FD_T_Q16), MAX_FD_T_Q16)
    }

    /// CFO ICI at `ε` (subcarrier spacings, Q16; `|ε|` saturated to 0.5), Q32.
    pub fn cfo_q32(&self, eps_q16: i32) -> u32 {
        lookup(
            &self.cfo,
            eps_q16.unsigned_abs().min(MAX_EPS_Q16),
            MAX_EPS_Q16,
        )
    }

    /// The prediction from a Doppler estimate `fd·T` and a residual CFO `ε` (both Q16).
    pub fn predict(&self, fd_t_q16: u32, eps_q16: i32) -> IciPredictionQ15 {
        let d = self.doppler_q32(fd_t_q16);
        let c = self.cfo_q32(eps_q16);
        let ici = d.saturating_add(c);
        let signal = u64::from(u32::MAX - ici) + 1;
        IciPredictionQ15 {
            doppler_q32: d,
            cfo_q32: c,
            ici_q32: ici,
            sir_db_q8: ratio_db_q8(signal, u64::from(ici)).unwrap_or(i16::MAX),
        }
    }
}

/// `x²·g(x)` in Q32 for `x` in Q16 on a uniform grid over `[0, max]`.
fn lookup(table: &[u32; ICI_POINTS], x_q16: u32, max_q16: u32) -> u32 {
    if max_q16 == 0 {
        return 0;
    }
    // Position in table steps, Q16.
    let pos = ((u64::from(x_q16) * (ICI_POINTS as u64 - 1)) << 16) / u64::from(max_q16);
    let i = (pos >> 16) as usize;
    let f = (pos & 0xffff) as i64;
    let g0 = i64::from(table.get(i).copied().unwrap_or(0));
    let g1 = i64::from(table.get(i + 1).copied().unwrap_or(g0 as u32));
    let g = g0 + shift_round((g1 - g0) * f, 16);
    // x² in Q32 (≤ 2^30 for x ≤ ½), times g in Q28 (≤ 2^31): at most 2^61, then back to Q32.
    let x2 = u64::from(x_q16) * u64::from(x_q16);
    let g = (g.max(0) as u64).min(1 << 31);
    let p = (x2.min(1 << 30) * g) >> G_FRAC;
    p.min(u64::from(u32::MAX)) as u32
}
