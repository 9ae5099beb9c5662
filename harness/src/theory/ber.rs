//! Closed-form bit and symbol error rates for coherent detection with Gray mapping, over AWGN and
//! flat Rayleigh fading. The link simulation is checked against these.
//!
//! Conventions (as in `/work/shared/REFERENCES.md`): complex baseband; noise `CN(0, N0)` with `N0`
//! the total complex variance; `Es/N0` per symbol; `Eb/N0 = (Es/N0) / log2 M`. All SNR arguments
//! are *linear* power ratios (use [`db_to_linear`]) unless the name says `db`. For Rayleigh
//! fading the argument is the *mean* SNR, with unit-power channel `E|h|^2 = 1` and perfect CSI.
//!
//! Supported orders are given as `bits_per_symbol` (`log2 M`): 1 = BPSK, 2 = QPSK (= 4-QAM),
//! 4 = 16-QAM, 6 = 64-QAM, 8 = 256-QAM. Anything else gives `None`.
//!
//! Source status (from REFERENCES.md item 5): the Cho & Yoon citation is confirmed and their
//! formula is verified numerically there; the Proakis & Salehi and Simon & Alouini citations are
//! from memory (formulas verified numerically there). No equation numbers are given because none
//! were confirmed.

use core::f64::consts::{FRAC_2_PI, SQRT_2};

/// Source of [`ber_awgn`]: exact Gray-mapped BER over AWGN.
pub const BER_AWGN_SOURCE: &str = "K. Cho, D. Yoon, IEEE Trans. Commun. 50(7):1074\u{2013}1080, \
     2002 (square QAM); J. G. Proakis, M. Salehi, Digital Communications, 5th ed., \
     McGraw-Hill 2008, ch. 4 (BPSK/QPSK)";

/// Source of [`ber_awgn_approx_qam`]: the usual nearest-neighbour Gray approximation
/// `P_b ~ P_s / log2 M` with `P_s ~ 4(1 - 1/sqrt M) Q(.)` (citation from memory).
pub const BER_AWGN_APPROX_QAM_SOURCE: &str = "J. G. Proakis, M. Salehi, Digital Communications, \
     5th ed., McGraw-Hill 2008, ch. 4 (square M-QAM SER / log2 M, nearest-neighbour \
     approximation)";

/// Source of [`ser_awgn_square_qam`]: exact symbol error rate of square M-QAM over AWGN
/// (citation from memory).
pub const SER_AWGN_SQUARE_QAM_SOURCE: &str = "J. G. Proakis, M. Salehi, Digital Communications, \
     5th ed., McGraw-Hill 2008, ch. 4 (square M-QAM SER)";

/// Source of [`ber_rayleigh`]: BPSK/QPSK closed form, and the Cho–Yoon sum with every `erfc`
/// term replaced by its exact Rayleigh average (exact because the BER is linear in those terms).
pub const BER_RAYLEIGH_SOURCE: &str = "J. G. Proakis, M. Salehi, Digital Communications, \
     5th ed., McGraw-Hill 2008, ch. 13 (BPSK/QPSK); K. Cho, D. Yoon, IEEE Trans. Commun. \
     50(7):1074\u{2013}1080, 2002, each erfc term averaged over Rayleigh fading (square QAM)";

/// Source of [`ber_rayleigh_bpsk_high_snr`]: high-SNR asymptote `1/(4 g)` of the BPSK Rayleigh BER
/// (citation from memory).
pub const BER_RAYLEIGH_HIGH_SNR_SOURCE: &str = "J. G. Proakis, M. Salehi, Digital \
     Communications, 5th ed., McGraw-Hill 2008, ch. 13 (BPSK Rayleigh, high-SNR asymptote)";

/// Source of [`ser_rayleigh_square_qam`]: square M-QAM SER over flat Rayleigh fading
/// (citation from memory).
pub const SER_RAYLEIGH_SQUARE_QAM_SOURCE: &str = "M. K. Simon, M.-S. Alouini, Digital \
     Communication over Fading Channels, 2nd ed., Wiley 2005, ch. 8 (square M-QAM, Rayleigh)";

/// The `bits_per_symbol` values (`log2 M`) accepted by the functions of this module.
pub const SUPPORTED_BITS_PER_SYMBOL: [u32; 5] = [1, 2, 4, 6, 8];

/// Search interval for [`eb_n0_for_ber`], in dB of Eb/N0.
const SEARCH_LOW_DB: f64 = -50.0;
const SEARCH_HIGH_DB: f64 = 60.0;

/// Gaussian tail probability `Q(x) = P(Z > x)` for `Z ~ N(0, 1)`, computed as
/// `0.5 erfc(x / sqrt 2)` (dimensionless).
///
/// Source: the standard Gaussian-tail definition, as stated in `/work/shared/REFERENCES.md`
/// item 5.
pub fn q_function(x: f64) -> f64 {
    0.5 * libm::erfc(x / SQRT_2)
}

/// Converts a power ratio in decibels to a linear power ratio, `10^(db/10)`.
pub fn db_to_linear(db: f64) -> f64 {
    10f64.powf(db / 10.0)
}

/// Converts a linear power ratio to decibels, `10 log10(linear)`. Gives `-inf` for 0 and NaN for
/// negative input.
pub fn linear_to_db(linear: f64) -> f64 {
    10.0 * linear.log10()
}

/// Energy per bit to noise density from energy per symbol to noise density (both linear):
/// `Eb/N0 = (Es/N0) / bits_per_symbol`. `bits_per_symbol` is `log2 M`; 0 gives `+inf` or NaN.
pub fn eb_n0_from_es_n0(es_n0_linear: f64, bits_per_symbol: u32) -> f64 {
    es_n0_linear / f64::from(bits_per_symbol)
}

/// Energy per symbol to noise density from energy per bit to noise density (both linear):
/// `Es/N0 = (Eb/N0) * bits_per_symbol`; inverse of [`eb_n0_from_es_n0`].
pub fn es_n0_from_eb_n0(eb_n0_linear: f64, bits_per_symbol: u32) -> f64 {
    eb_n0_linear * f64::from(bits_per_symbol)
}

/// Whether `bits_per_symbol` is one of [`SUPPORTED_BITS_PER_SYMBOL`].
pub fn is_supported(bits_per_symbol: u32) -> bool {
    SUPPORTED_BITS_PER_SYMBOL.contains(&bits_per_symbol)
}

/// Human-readable name of the constellation with `bits_per_symbol` bits (e.g. `"16-QAM"`), or
/// `None` if the order is not supported.
pub fn modulation_name(bits_per_symbol: u32) -> Option<&'static str> {
    match bits_per_symbol {
        1 => Some("BPSK"),
        2 => Some("QPSK"),
        4 => Some("16-QAM"),
        6 => Some("64-QAM"),
        8 => Some("256-QAM"),
        _ => None,
    }
}

/// `Some(M)` as f64 for a supported square-QAM order (`bits_per_symbol` in {2, 4, 6, 8}).
fn square_qam_order(bits_per_symbol: u32) -> Option<f64> {
    if bits_per_symbol != 1 && is_supported(bits_per_symbol) {
        Some(f64::from(1u32 << bits_per_symbol))
    } else {
        None
    }
}

/// `true` for a usable SNR argument (non-negative, not NaN; `+inf` allowed).
fn valid_snr(snr: f64) -> bool {
    snr >= 0.0
}

/// Rayleigh average of `erfc(sqrt(x))` with `x` exponentially distributed with mean `mean_x`:
/// `1 - sqrt(mean_x / (1 + mean_x))`, written without cancellation as
/// `1 / ((1 + mean_x)(1 + s))`, `s = sqrt(mean_x / (1 + mean_x))`.
fn rayleigh_erfc_average(mean_x: f64) -> f64 {
    let s = (1.0 + 1.0 / mean_x).sqrt().recip();
    ((1.0 + mean_x) * (1.0 + s)).recip()
}

/// Cho–Yoon sum for Gray square M-QAM (`bits_per_symbol` even, `>= 2`), with each
/// `erfc((2i+1) sqrt(base * Eb/N0))` replaced by `erfc_term(a^2)` where `a^2 = (2i+1)^2 base`
/// and `base = 3 log2(M) / (2 (M - 1))`:
///
/// `P_b = (1/log2 sqrt M) sum_{k=1}^{log2 sqrt M} (1/sqrt M)
///        sum_{i=0}^{(1-2^-k) sqrt M - 1} w(i,k) erfc_term(a_i^2)`,
/// `w(i,k) = (-1)^floor(i 2^(k-1)/sqrt M) (2^(k-1) - floor(i 2^(k-1)/sqrt M + 1/2))`.
fn cho_yoon_sum(bits_per_symbol: u32, erfc_term: impl Fn(f64) -> f64) -> f64 {
    let half_bits = bits_per_symbol / 2; // log2 sqrt M
    let levels = 1u64 << half_bits; // sqrt M
    let m = f64::from(1u32 << bits_per_symbol);
    let base = 3.0 * f64::from(bits_per_symbol) / (2.0 * (m - 1.0));
    let mut total = 0.0;
    for k in 1..=half_bits {
        let half_pow = 1u64 << (k - 1); // 2^(k-1)
        let count = levels - (levels >> k); // (1 - 2^-k) sqrt M
        let mut p_k = 0.0;
        for i in 0..count {
            // floor(i 2^(k-1) / sqrt M) and floor(i 2^(k-1) / sqrt M + 1/2), in integers.
            let sign_exp = (i * half_pow) / levels;
            let rounded = (2 * i * half_pow + levels) / (2 * levels);
            let magnitude = (half_pow - rounded) as f64;
            let weight = if sign_exp.is_multiple_of(2) {
                magnitude
            } else {
                -magnitude
            };
            if weight != 0.0 {
                let odd = (2 * i + 1) as f64;
                p_k += weight * erfc_term(odd * odd * base);
            }
        }
        total += p_k / levels as f64;
    }
    total / f64::from(half_bits)
}

/// Exact bit error rate of Gray-mapped BPSK, QPSK or square M-QAM over AWGN (dimensionless
/// probability), for `eb_n0_linear` = Eb/N0 as a linear ratio.
///
/// BPSK and Gray QPSK: `P_b = Q(sqrt(2 Eb/N0))`. Square M-QAM: the general Cho–Yoon sum
/// (see [`BER_AWGN_SOURCE`]); for 16-QAM it reduces to
/// `(3/4) Q(d) + (1/2) Q(3d) - (1/4) Q(5d)`, `d = sqrt(0.8 Eb/N0)`.
///
/// Sources: K. Cho, D. Yoon, "On the general BER expression of one- and two-dimensional
/// amplitude modulations", IEEE Trans. Commun. 50(7):1074–1080, July 2002; J. G. Proakis,
/// M. Salehi, *Digital Communications*, 5th ed., McGraw-Hill 2008, ch. 4 (citation from memory).
///
/// Returns `None` for an unsupported `bits_per_symbol` or a negative/NaN SNR.
pub fn ber_awgn(bits_per_symbol: u32, eb_n0_linear: f64) -> Option<f64> {
    if !is_supported(bits_per_symbol) || !valid_snr(eb_n0_linear) {
        return None;
    }
    Some(match bits_per_symbol {
        1 | 2 => q_function((2.0 * eb_n0_linear).sqrt()),
        _ => cho_yoon_sum(bits_per_symbol, |a2| libm::erfc((a2 * eb_n0_linear).sqrt())),
    })
}

/// Common approximation of the Gray square M-QAM bit error rate over AWGN (dimensionless):
/// `P_b ~ (4 / log2 M)(1 - 1/sqrt M) Q(sqrt(3 log2(M) Eb/N0 / (M - 1)))`, for comparison with
/// [`ber_awgn`]. Exact for QPSK; tight at high SNR.
///
/// Source: J. G. Proakis, M. Salehi, *Digital Communications*, 5th ed., McGraw-Hill 2008,
/// ch. 4 (citation from memory).
///
/// Returns `None` unless `bits_per_symbol` is 2, 4, 6 or 8, or for a negative/NaN SNR.
pub fn ber_awgn_approx_qam(bits_per_symbol: u32, eb_n0_linear: f64) -> Option<f64> {
    let m = square_qam_order(bits_per_symbol)?;
    if !valid_snr(eb_n0_linear) {
        return None;
    }
    let log2m = f64::from(bits_per_symbol);
    let q = 1.0 - 1.0 / m.sqrt();
    let arg = (3.0 * log2m * eb_n0_linear / (m - 1.0)).sqrt();
    Some(4.0 / log2m * q * q_function(arg))
}

/// Exact symbol error rate of square M-QAM over AWGN (dimensionless), for `es_n0_linear` =
/// Es/N0 as a linear ratio: `P_s = 4 q Q(x) - 4 q^2 Q(x)^2`, `q = 1 - 1/sqrt M`,
/// `x = sqrt(3 Es/N0 / (M - 1))`.
///
/// Source: J. G. Proakis, M. Salehi, *Digital Communications*, 5th ed., McGraw-Hill 2008,
/// ch. 4 (citation from memory).
///
/// Returns `None` unless `m_bits` (`log2 M`) is 2, 4, 6 or 8, or for a negative/NaN SNR.
pub fn ser_awgn_square_qam(m_bits: u32, es_n0_linear: f64) -> Option<f64> {
    let m = square_qam_order(m_bits)?;
    if !valid_snr(es_n0_linear) {
        return None;
    }
    let q = 1.0 - 1.0 / m.sqrt();
    let p = q_function((3.0 * es_n0_linear / (m - 1.0)).sqrt());
    // 4qP - 4q^2 P^2 = 4qP (1 - qP): no cancellation since qP <= 1/2.
    Some(4.0 * q * p * (1.0 - q * p))
}

/// Exact bit error rate of Gray-mapped BPSK, QPSK or square M-QAM over flat Rayleigh fading
/// with coherent detection and perfect CSI (dimensionless), for `mean_eb_n0_linear` = mean
/// Eb/N0 `g` as a linear ratio.
///
/// BPSK and Gray QPSK: `P_b = 0.5 (1 - sqrt(g / (1 + g)))`. Square M-QAM: the Cho–Yoon sum of
/// [`ber_awgn`] with every `erfc(a sqrt(Eb/N0))` replaced by its Rayleigh average
/// `1 - sqrt(a^2 g / (1 + a^2 g))`; this is exact because the BER is linear in those terms.
/// Evaluated in a cancellation-free form.
///
/// Sources: J. G. Proakis, M. Salehi, *Digital Communications*, 5th ed., McGraw-Hill 2008,
/// ch. 13 (BPSK; citation from memory); K. Cho, D. Yoon, IEEE Trans. Commun. 50(7):1074–1080,
/// 2002 (the sum being averaged).
///
/// Returns `None` for an unsupported `bits_per_symbol` or a negative/NaN SNR.
pub fn ber_rayleigh(bits_per_symbol: u32, mean_eb_n0_linear: f64) -> Option<f64> {
    if !is_supported(bits_per_symbol) || !valid_snr(mean_eb_n0_linear) {
        return None;
    }
    Some(match bits_per_symbol {
        1 | 2 => 0.5 * rayleigh_erfc_average(mean_eb_n0_linear),
        _ => cho_yoon_sum(bits_per_symbol, |a2| {
            rayleigh_erfc_average(a2 * mean_eb_n0_linear)
        }),
    })
}

/// High-SNR asymptote of the BPSK/QPSK bit error rate over flat Rayleigh fading,
/// `1 / (4 g)` for mean Eb/N0 `g` (linear); an upper bound on [`ber_rayleigh`] for 1 or 2 bits.
///
/// Source: J. G. Proakis, M. Salehi, *Digital Communications*, 5th ed., McGraw-Hill 2008,
/// ch. 13 (citation from memory).
pub fn ber_rayleigh_bpsk_high_snr(mean_eb_n0_linear: f64) -> f64 {
    0.25 / mean_eb_n0_linear
}

/// Exact symbol error rate of square M-QAM over flat Rayleigh fading with coherent detection
/// and perfect CSI (dimensionless), for `mean_es_n0_linear` = mean Es/N0 as a linear ratio:
///
/// `P_s = 2 q (1 - s) - q^2 [1 - (4/pi) s atan(1/s)]`, `q = 1 - 1/sqrt M`,
/// `c = 1.5 (Es/N0) / (M - 1)`, `s = sqrt(c / (1 + c))`.
///
/// Evaluated without cancellation using `1 - s = 1/((1+c)(1+s))` and
/// `atan(1/s) = pi/4 + atan((1-s)/(1+s))`.
///
/// Source: M. K. Simon, M.-S. Alouini, *Digital Communication over Fading Channels*, 2nd ed.,
/// Wiley 2005, ch. 8 (citation from memory).
///
/// Returns `None` unless `m_bits` (`log2 M`) is 2, 4, 6 or 8, or for a negative/NaN SNR.
pub fn ser_rayleigh_square_qam(m_bits: u32, mean_es_n0_linear: f64) -> Option<f64> {
    let m = square_qam_order(m_bits)?;
    if !valid_snr(mean_es_n0_linear) {
        return None;
    }
    let q = 1.0 - 1.0 / m.sqrt();
    let c = 1.5 * mean_es_n0_linear / (m - 1.0);
    let s = (1.0 + 1.0 / c).sqrt().recip();
    // u = 1 - s, and 1 - (4/pi) s atan(1/s) = u - (4/pi) s atan(u / (1 + s)).
    let u = ((1.0 + c) * (1.0 + s)).recip();
    let bracket = u - 2.0 * FRAC_2_PI * s * (u / (1.0 + s)).atan();
    Some(2.0 * q * u - q * q * bracket)
}

/// Eb/N0 in dB at which the exact AWGN BER of [`ber_awgn`] equals `target_ber`, found by
/// bisection on Eb/N0 in dB over [-50, 60] dB to about 1e-12 dB.
///
/// Returns `None` for an unsupported `bits_per_symbol`, a target that is not a finite
/// probability in (0, 1), or one not reached inside the search interval (targets close to 1/2).
pub fn eb_n0_for_ber(bits_per_symbol: u32, target_ber: f64) -> Option<f64> {
    if !(is_supported(bits_per_symbol) && target_ber > 0.0 && target_ber < 1.0) {
        return None;
    }
    let ber_at = |db: f64| ber_awgn(bits_per_symbol, db_to_linear(db));
    let (mut lo, mut hi) = (SEARCH_LOW_DB, SEARCH_HIGH_DB);
    // BER decreases with Eb/N0: need ber(lo) >= target >= ber(hi).
    if ber_at(lo)? < target_ber || ber_at(hi)? > target_ber {
        return None;
    }
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi || hi - lo < 1e-12 {
            break;
        }
        if ber_at(mid)? > target_ber {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Some(0.5 * (lo + hi))
}

#[cfg(test)]
mod tests {
    //! Check values are from `/work/shared/REFERENCES.md` item 5 (tables 5a and 5b, the 9.6 dB
    //! check and the 1e-5 thresholds), which were computed there with mpmath/scipy. The tables
    //! print 6 significant digits, so they are compared with a relative tolerance of 1e-5
    //! (half a unit in the 6th digit is at most 5e-6 relative). REFERENCES.md tags the Proakis
    //! & Salehi and Simon & Alouini citations as from memory (formulas verified numerically).
    use super::*;

    use super::super::table::{assert_rel, TABLE_REL};

    /// Eb/N0 rows of tables 5a/5b, in dB.
    const ROWS_DB: [f64; 5] = [0.0, 4.0, 8.0, 10.0, 12.0];

    /// Linear ratio from dB, computed here independently of `db_to_linear`.
    fn lin(db: f64) -> f64 {
        10f64.powf(db / 10.0)
    }

    #[test]
    fn q_function_known_values() {
        // Standard normal tail values, e.g. M. Abramowitz, I. A. Stegun, Handbook of
        // Mathematical Functions, 1964, table 26.1 (from memory): Q(0) = 1/2 exactly,
        // Q(1) = 0.158655254, Q(2) = 0.0227501319, Q(3) = 0.00134989803.
        assert_eq!(q_function(0.0), 0.5);
        assert_rel(q_function(1.0), 0.158_655_254, 1e-8, "Q(1)");
        assert_rel(q_function(2.0), 0.022_750_131_9, 1e-8, "Q(2)");
        assert_rel(q_function(3.0), 0.001_349_898_03, 1e-8, "Q(3)");
        // Symmetry Q(-x) = 1 - Q(x) (definition of Q as a normal tail).
        assert_rel(q_function(-1.0), 1.0 - 0.158_655_254, 1e-8, "Q(-1)");
    }

    #[test]
    fn db_conversions() {
        // Definition of the decibel for power ratios: dB = 10 log10(ratio).
        assert_rel(db_to_linear(10.0), 10.0, 1e-15, "10 dB");
        assert_rel(db_to_linear(-20.0), 0.01, 1e-15, "-20 dB");
        assert_rel(db_to_linear(3.0), 1.995_262_315, 1e-9, "3 dB");
        assert_rel(linear_to_db(1000.0), 30.0, 1e-15, "1000");
        assert_rel(linear_to_db(2.0), 3.010_299_957, 1e-9, "2");
        assert_eq!(linear_to_db(1.0), 0.0);
        // REFERENCES.md conventions: Eb/N0 = SNR / log2(M).
        assert_rel(eb_n0_from_es_n0(8.0, 4), 2.0, 1e-15, "Es->Eb");
        assert_rel(es_n0_from_eb_n0(2.0, 6), 12.0, 1e-15, "Eb->Es");
    }

    #[test]
    fn table_5a_bpsk_qpsk() {
        // Proakis & Salehi 2008 ch. 4 formula; values REFERENCES.md table 5a, column BPSK/QPSK.
        let want = [0.0786496, 0.0125008, 0.000190908, 3.87211e-06, 9.00601e-09];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            assert_rel(ber_awgn(1, lin(db)).unwrap(), w, TABLE_REL, "BPSK AWGN");
            assert_rel(ber_awgn(2, lin(db)).unwrap(), w, TABLE_REL, "QPSK AWGN");
        }
    }

    #[test]
    fn table_5a_16qam_exact() {
        // Cho & Yoon 2002; values REFERENCES.md table 5a, column "16QAM exact (Cho-Yoon)".
        let want = [0.140982, 0.0586237, 0.00924721, 0.00175415, 0.000138659];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            assert_rel(
                ber_awgn(4, lin(db)).unwrap(),
                w,
                TABLE_REL,
                "16QAM AWGN exact",
            );
        }
    }

    #[test]
    fn table_5a_16qam_approx() {
        // Proakis & Salehi 2008 ch. 4 approximation; values REFERENCES.md table 5a,
        // column "16QAM approx".
        let want = [0.13916, 0.0586185, 0.00924721, 0.00175415, 0.000138659];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            assert_rel(
                ber_awgn_approx_qam(4, lin(db)).unwrap(),
                w,
                TABLE_REL,
                "16QAM AWGN approx",
            );
        }
    }

    #[test]
    fn table_5a_16qam_ser() {
        // Proakis & Salehi 2008 ch. 4 (square M-QAM SER); values REFERENCES.md table 5a,
        // column "16QAM SER", rows in Eb/N0 so Es/N0 = 4 Eb/N0.
        let want = [0.479178, 0.220729, 0.0366468, 0.00700429, 0.000554558];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            let es_n0 = 4.0 * lin(db);
            assert_rel(
                ser_awgn_square_qam(4, es_n0).unwrap(),
                w,
                TABLE_REL,
                "16QAM SER",
            );
        }
    }

    #[test]
    fn table_5a_64qam_exact() {
        // Cho & Yoon 2002; values REFERENCES.md table 5a, column "64QAM exact".
        let want = [0.199841, 0.118523, 0.0523339, 0.0265327, 0.00972399];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            assert_rel(
                ber_awgn(6, lin(db)).unwrap(),
                w,
                TABLE_REL,
                "64QAM AWGN exact",
            );
        }
    }

    #[test]
    fn table_5a_64qam_approx() {
        // Proakis & Salehi 2008 ch. 4 approximation; values REFERENCES.md table 5a,
        // column "64QAM approx".
        let want = [0.172953, 0.115764, 0.0523198, 0.0265326, 0.00972399];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            assert_rel(
                ber_awgn_approx_qam(6, lin(db)).unwrap(),
                w,
                TABLE_REL,
                "64QAM AWGN approx",
            );
        }
    }

    #[test]
    fn table_5b_bpsk_qpsk_rayleigh() {
        // Proakis & Salehi 2008 ch. 13; values REFERENCES.md table 5b, column BPSK/QPSK Rayleigh.
        let want = [0.146447, 0.0771369, 0.0354591, 0.0232687, 0.0150647];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            assert_rel(
                ber_rayleigh(1, lin(db)).unwrap(),
                w,
                TABLE_REL,
                "BPSK Rayleigh",
            );
            assert_rel(
                ber_rayleigh(2, lin(db)).unwrap(),
                w,
                TABLE_REL,
                "QPSK Rayleigh",
            );
        }
    }

    #[test]
    fn table_5b_high_snr_asymptote() {
        // Proakis & Salehi 2008 ch. 13 asymptote 1/(4 g); values REFERENCES.md table 5b,
        // column "1/(4 gb) asymptote".
        let want = [0.25, 0.0995268, 0.0396223, 0.025, 0.0157739];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            let g = lin(db);
            assert_rel(ber_rayleigh_bpsk_high_snr(g), w, TABLE_REL, "1/(4g)");
            // The exact value lies below the asymptote (compare columns of table 5b).
            assert!(ber_rayleigh(1, g).unwrap() < ber_rayleigh_bpsk_high_snr(g));
        }
    }

    #[test]
    fn table_5b_16qam_ber_rayleigh() {
        // Cho & Yoon 2002 terms averaged over Rayleigh (REFERENCES.md item 5); values
        // REFERENCES.md table 5b, column "16QAM BER Rayleigh (exact)".
        let want = [0.197574, 0.119877, 0.0619877, 0.042371, 0.0282514];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            assert_rel(
                ber_rayleigh(4, lin(db)).unwrap(),
                w,
                TABLE_REL,
                "16QAM Rayleigh",
            );
        }
    }

    #[test]
    fn table_5b_16qam_ser_rayleigh() {
        // Simon & Alouini 2005 ch. 8; values REFERENCES.md table 5b, column
        // "16QAM SER Rayleigh (Simon-Alouini)", rows in mean Eb/N0 so Es/N0 = 4 Eb/N0.
        let want = [0.549133, 0.359672, 0.19444, 0.134636, 0.0905552];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            let es_n0 = 4.0 * lin(db);
            assert_rel(
                ser_rayleigh_square_qam(4, es_n0).unwrap(),
                w,
                TABLE_REL,
                "16QAM SER Rayleigh",
            );
        }
    }

    #[test]
    fn table_5b_64qam_ber_rayleigh() {
        // Cho & Yoon 2002 terms averaged over Rayleigh (REFERENCES.md item 5); values
        // REFERENCES.md table 5b, column "64QAM BER Rayleigh (exact)".
        let want = [0.247063, 0.171542, 0.104215, 0.0766796, 0.0543649];
        for (&db, &w) in ROWS_DB.iter().zip(&want) {
            assert_rel(
                ber_rayleigh(6, lin(db)).unwrap(),
                w,
                TABLE_REL,
                "64QAM Rayleigh",
            );
        }
    }

    #[test]
    fn bpsk_at_9_6_db() {
        // Proakis & Salehi 2008 ch. 4 formula; value REFERENCES.md item 5, "The 9.6 dB check":
        // Pb = 9.73618e-06 at 9.6 dB (so the "9.6 dB for 1e-5" rule is only approximate).
        let p = ber_awgn(1, lin(9.6)).unwrap();
        assert_rel(p, 9.73618e-06, TABLE_REL, "BPSK 9.6 dB");
        assert!(p < 1e-5);
    }

    #[test]
    fn thresholds_for_1e_minus_5() {
        // Cho & Yoon 2002 / Proakis & Salehi 2008 formulas; values REFERENCES.md item 5,
        // "Eb/N0 for Pb = 1e-5": BPSK/QPSK 9.58786 dB, 16QAM 13.43452 dB, 64QAM 17.78689 dB.
        // Printed to 5 decimals: absolute tolerance half a unit of the last digit (+ margin).
        let tol_db = 5e-6 + 1e-9;
        for (bits, want) in [(1, 9.58786), (2, 9.58786), (4, 13.43452), (6, 17.78689)] {
            let got = eb_n0_for_ber(bits, 1e-5).unwrap();
            assert!(
                (got - want).abs() <= tol_db,
                "{bits} bits: got {got} dB, want {want} dB"
            );
        }
    }

    #[test]
    fn threshold_round_trip_and_rejects() {
        // Bisection must invert the monotone AWGN BER: BER at the returned Eb/N0 equals the
        // target (self-consistency, no external value).
        for bits in SUPPORTED_BITS_PER_SYMBOL {
            for target in [1e-2, 1e-5, 1e-9] {
                let db = eb_n0_for_ber(bits, target).unwrap();
                let p = ber_awgn(bits, lin(db)).unwrap();
                assert_rel(p, target, 1e-9, "round trip");
            }
        }
        assert_eq!(eb_n0_for_ber(3, 1e-5), None);
        assert_eq!(eb_n0_for_ber(1, 0.0), None);
        assert_eq!(eb_n0_for_ber(1, 0.6), None); // BER never exceeds 1/2
        assert_eq!(eb_n0_for_ber(1, f64::NAN), None);
    }

    #[test]
    fn unsupported_orders_return_none() {
        for bits in [0, 3, 5, 7, 9, 10, 32] {
            assert_eq!(ber_awgn(bits, 1.0), None);
            assert_eq!(ber_rayleigh(bits, 1.0), None);
            assert_eq!(ber_awgn_approx_qam(bits, 1.0), None);
            assert_eq!(ser_awgn_square_qam(bits, 1.0), None);
            assert_eq!(ser_rayleigh_square_qam(bits, 1.0), None);
            assert_eq!(modulation_name(bits), None);
        }
        // BPSK is not a square QAM.
        assert_eq!(ber_awgn_approx_qam(1, 1.0), None);
        assert_eq!(ser_awgn_square_qam(1, 1.0), None);
        assert_eq!(ser_rayleigh_square_qam(1, 1.0), None);
        // Invalid SNR.
        assert_eq!(ber_awgn(4, -1.0), None);
        assert_eq!(ber_rayleigh(4, f64::NAN), None);
    }

    #[test]
    fn limits_at_zero_and_infinite_snr() {
        // At zero SNR every bit is a coin flip (BER 1/2) and M-QAM SER is 1 - 1/M (uniform
        // guess); at infinite SNR there are no errors. Both follow from the definitions.
        for bits in SUPPORTED_BITS_PER_SYMBOL {
            assert_rel(ber_awgn(bits, 0.0).unwrap(), 0.5, 1e-14, "AWGN BER at 0");
            assert_rel(
                ber_rayleigh(bits, 0.0).unwrap(),
                0.5,
                1e-14,
                "Rayleigh BER at 0",
            );
            assert_eq!(ber_awgn(bits, f64::INFINITY), Some(0.0));
            assert_eq!(ber_rayleigh(bits, f64::INFINITY), Some(0.0));
        }
        for bits in [2, 4, 6, 8] {
            let m = f64::from(1u32 << bits);
            let want = 1.0 - 1.0 / m;
            assert_rel(
                ser_awgn_square_qam(bits, 0.0).unwrap(),
                want,
                1e-14,
                "SER at 0",
            );
            assert_rel(
                ser_rayleigh_square_qam(bits, 0.0).unwrap(),
                want,
                1e-14,
                "Rayleigh SER at 0",
            );
            assert_eq!(ser_rayleigh_square_qam(bits, f64::INFINITY), Some(0.0));
        }
    }

    #[test]
    fn qam256_is_some_and_monotone() {
        let mut prev_awgn = f64::INFINITY;
        let mut prev_ray = f64::INFINITY;
        for step in 0..=80 {
            let db = -10.0 + 0.5 * f64::from(step);
            let awgn = ber_awgn(8, lin(db)).expect("256-QAM AWGN supported");
            let ray = ber_rayleigh(8, lin(db)).expect("256-QAM Rayleigh supported");
            assert!(awgn < prev_awgn, "AWGN BER not decreasing at {db} dB");
            assert!(ray < prev_ray, "Rayleigh BER not decreasing at {db} dB");
            assert!(awgn > 0.0 && ray > awgn, "fading must cost, at {db} dB");
            prev_awgn = awgn;
            prev_ray = ray;
        }
    }

    /// Exact Gray BER of square M-QAM (`bits` even) over AWGN by enumeration of one PAM
    /// dimension: Gray label `gray(i) = i ^ (i >> 1)`, level `2i - (L-1)` scaled to unit mean
    /// symbol energy over the 2-D constellation, decision intervals bounded by midpoints, each
    /// interval probability from Q-function tails, weighted by the Hamming distance of labels.
    /// The two dimensions are independent and identical, so the per-dimension BER is the BER.
    fn brute_force_gray_qam_ber(bits: u32, eb_n0: f64) -> f64 {
        let half_bits = bits / 2;
        let l = 1i64 << half_bits;
        let gray = |i: i64| i ^ (i >> 1);
        // Es = 2 * scale^2 * (L^2 - 1)/3 = 1.
        let scale = (3.0 / (2.0 * ((l * l - 1) as f64))).sqrt();
        let n0 = 1.0 / (f64::from(bits) * eb_n0); // Es = 1
        let sigma = (n0 / 2.0).sqrt();
        let level = |i: i64| (2 * i - (l - 1)) as f64 * scale;
        let mut bit_errors = 0.0;
        for i in 0..l {
            let x = level(i);
            for j in 0..l {
                if j == i {
                    continue;
                }
                let lower = (j > 0).then(|| (2 * j - l) as f64 * scale);
                let upper = (j < l - 1).then(|| (2 * j + 2 - l) as f64 * scale);
                // Use upper tails of positive arguments only, to avoid cancellation.
                let prob = if j > i {
                    let near = q_function((lower.unwrap() - x) / sigma);
                    let far = upper.map_or(0.0, |u| q_function((u - x) / sigma));
                    near - far
                } else {
                    let near = q_function((x - upper.unwrap()) / sigma);
                    let far = lower.map_or(0.0, |lo| q_function((x - lo) / sigma));
                    near - far
                };
                let hamming = f64::from((gray(i) ^ gray(j)).count_ones());
                bit_errors += prob * hamming;
            }
        }
        bit_errors / (l as f64 * f64::from(half_bits))
    }

    #[test]
    fn cho_yoon_matches_brute_force_gray_enumeration() {
        // Independent exact computation (enumeration of decision intervals) versus the
        // Cho & Yoon 2002 closed form; REFERENCES.md item 5 reports agreement within 1e-14.
        for bits in [2, 4, 6, 8] {
            for step in 0..=28 {
                let db = -4.0 + f64::from(step);
                let g = lin(db);
                let want = brute_force_gray_qam_ber(bits, g);
                let got = ber_awgn(bits, g).unwrap();
                assert_rel(got, want, 1e-12, &format!("{bits} bits, {db} dB"));
            }
        }
    }

    #[test]
    fn brute_force_16qam_matches_three_term_expansion() {
        // REFERENCES.md item 5 / Cho & Yoon 2002: 16-QAM Pb = (3/4)Q(d) + (1/2)Q(3d) - (1/4)Q(5d),
        // d = sqrt(0.8 Eb/N0). Checks the brute force itself.
        for db in [0.0, 5.0, 10.0, 15.0] {
            let g = lin(db);
            let d = (0.8 * g).sqrt();
            let want =
                0.75 * q_function(d) + 0.5 * q_function(3.0 * d) - 0.25 * q_function(5.0 * d);
            assert_rel(
                brute_force_gray_qam_ber(4, g),
                want,
                1e-12,
                "16QAM expansion",
            );
        }
    }

    /// Average of `f(gamma)` over an exponential SNR with mean `g`, by composite Simpson in
    /// `u` with `gamma = g u^2` (removes the square-root behaviour at 0):
    /// `int_0^inf f(g u^2) 2u exp(-u^2) du`, truncated at u = 9 (tail below 1e-35).
    fn rayleigh_average_numeric(g: f64, f: impl Fn(f64) -> f64) -> f64 {
        let n = 20_000;
        let h = 9.0 / f64::from(n);
        let integrand = |u: f64| f(g * u * u) * 2.0 * u * (-u * u).exp();
        let mut sum = integrand(0.0) + integrand(9.0);
        for k in 1..n {
            let w = if k % 2 == 1 { 4.0 } else { 2.0 };
            sum += w * integrand(f64::from(k) * h);
        }
        sum * h / 3.0
    }

    #[test]
    fn rayleigh_forms_match_numerical_average_of_awgn() {
        // Rayleigh error rate = AWGN error rate averaged over the exponential SNR pdf
        // (definition of the flat-fading average, as in Simon & Alouini 2005 ch. 8);
        // covers 256-QAM, which has no table entry.
        for db in [0.0, 6.0, 12.0, 20.0] {
            let g = lin(db);
            for bits in SUPPORTED_BITS_PER_SYMBOL {
                let want = rayleigh_average_numeric(g, |x| ber_awgn(bits, x).unwrap());
                let got = ber_rayleigh(bits, g).unwrap();
                assert_rel(got, want, 1e-9, &format!("BER {bits} bits, {db} dB"));
            }
            for bits in [2, 4, 6, 8] {
                let want = rayleigh_average_numeric(g, |x| ser_awgn_square_qam(bits, x).unwrap());
                let got = ser_rayleigh_square_qam(bits, g).unwrap();
                assert_rel(got, want, 1e-9, &format!("SER {bits} bits, {db} dB"));
            }
        }
    }

    #[test]
    fn qpsk_is_4qam_in_every_form() {
        // Gray QPSK = 4-QAM: Cho & Yoon 2002 sum, the approximation (exact for M = 4) and the
        // BPSK/QPSK closed form must coincide (Proakis & Salehi 2008 ch. 4).
        for db in [0.0, 5.0, 10.0] {
            let g = lin(db);
            let direct = ber_awgn(2, g).unwrap();
            let sum = cho_yoon_sum(2, |a2| libm::erfc((a2 * g).sqrt()));
            assert_rel(sum, direct, 1e-14, "Cho-Yoon M=4");
            assert_rel(
                ber_awgn_approx_qam(2, g).unwrap(),
                direct,
                1e-14,
                "approx M=4",
            );
        }
    }

    #[test]
    fn sources_are_named() {
        for s in [
            BER_AWGN_SOURCE,
            BER_AWGN_APPROX_QAM_SOURCE,
            SER_AWGN_SQUARE_QAM_SOURCE,
            BER_RAYLEIGH_SOURCE,
            BER_RAYLEIGH_HIGH_SNR_SOURCE,
            SER_RAYLEIGH_SQUARE_QAM_SOURCE,
        ] {
            assert!(s.contains("20"), "source without a year: {s}");
        }
        assert!(BER_AWGN_SOURCE.contains("Cho"));
        assert!(SER_RAYLEIGH_SQUARE_QAM_SOURCE.contains("Simon"));
    }
}
