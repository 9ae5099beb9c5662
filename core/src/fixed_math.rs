//! Integer helpers of the Q15 receiver: rounding shifts, a reciprocal and an inverse square
//! root by normalisation and Newton steps (no division instruction), and a block-exponent
//! number ([`Scaled`]) for per-bin factors designed in floating point.
//!
//! Everything here is exact integer arithmetic, so the host and every core compute the same
//! bits.

/// `v · 2^-s` rounded to nearest (ties away from zero for `s > 0`); `s ≤ 0` shifts left,
/// saturating to the `i64` range.
#[inline]
pub fn shift_round(v: i64, s: i32) -> i64 {
    if s > 0 {
        if s >= 63 {
            return 0;
        }
        let half = 1i64 << (s - 1);
        if v >= 0 {
            (v + half) >> s
        } else {
            -((-v + half) >> s)
        }
    } else if s == 0 {
        v
    } else {
        let l = (-s).min(62) as u32;
        v.checked_shl(l)
            .filter(|r| r >> l == v)
            .unwrap_or(if v >= 0 { i64::MAX } else { i64::MIN })
    }
}

/// Saturates an `i64` to `i16`.
#[inline]
pub fn sat16_64(v: i64) -> i16 {
    v.clamp(i64::from(i16::MIN), i64::from(i16::MAX)) as i16
}

/// Saturates an `i64` to `i32`.
#[inline]
pub fn sat32_64(v: i64) -> i32 {
    v.clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32
}

/// Reciprocal of `x > 0`: returns `(r, s)` with `1/x = r · 2^(s − 30)`, `r` in `[2^30, 2^31]`
/// (Q30 in `(1, 2]`), `s` the normalisation shift. `x` is normalised to `m = x·2^s ∈ [2^31,
/// 2^32)`, read as `μ = m/2^32 ∈ [1/2, 1)`; the reciprocal of `μ` starts from the linear seed
/// `48/17 − 32/17·μ` (maximum relative error 1/17) and takes three Newton steps
/// `r ← r(2 − μr)`, each squaring the error: better than 2^-30 relative (standard
/// Newton–Raphson division; common practice). Returns `None` for `x = 0`.
pub fn reciprocal(x: u32) -> Option<(i64, i32)> {
    if x == 0 {
        return None;
    }
    let s = x.leading_zeros() as i32;
    let m = i64::from(x << s); // μ·2^32, in [2^31, 2^32)
                               // Seed in Q30: 48/17·2^30 − 32/17·μ·2^30.
    let mut r: i64 = 3_031_741_620 - ((2_021_161_080 * (m >> 16)) >> 16);
    for _ in 0..3 {
        // e = 2 − μr in Q30: μr = m·r·2^-32 (Q30).
        let mr = (m * r) >> 32;
        let e = (2i64 << 30) - mr;
        r = (r * e) >> 30;
    }
    // 1/x = 1/(μ·2^(32−s)) = r·2^-30·2^(s−32).
    Some((r, s - 32))
}

/// Base-2 logarithm of `x > 0` in Q16 (`log2(x)·2^16`, up to 63·2^16): the integer part from
/// the leading zeros, 16 fraction bits by repeated squaring of the Q31 mantissa (each square
/// ≥ 2 yields a 1 bit and is halved; the classic bit-by-bit method, common practice). Error
/// below 2 LSB (3·10⁻⁵ in log2). `None` for `x = 0`.
pub fn log2_q16(x: u64) -> Option<i32> {
    if x == 0 {
        return None;
    }
    let lz = x.leading_zeros();
    let int = 63 - lz as i32;
    // Mantissa in Q31, [2^31, 2^32): x·2^lz is in [2^63, 2^64).
    let mut m = (x << lz) >> 32;
    let mut frac = 0i32;
    for bit in (0..16).rev() {
        let sq = m * m; // Q62, in [2^62, 2^64)
        if sq >= 1u64 << 63 {
            frac |= 1 << bit;
            m = sq >> 32;
        } else {
            m = sq >> 31;
        }
    }
    Some((int << 16) | frac)
}

/// `10·log10(num/den)` in dB Q8 (dB·256), saturated to the `i16` range; `None` when either
/// is 0. Integer only ([`log2_q16`]; `10·log10 2 = 3.0103`).
pub fn ratio_db_q8(num: u64, den: u64) -> Option<i16> {
    let d = i64::from(log2_q16(num)?) - i64::from(log2_q16(den)?);
    // dB·256 = log2·2^16 · 3.0103·256/2^16 = log2_q16 · 0.011759 ≈ (· 49321) >> 22.
    Some(sat16_64(shift_round(d * 49_321, 22)))
}

/// Inverse square root of `x > 0`: returns `(r, s)` with `1/sqrt(x) = r · 2^(s − 30)`.
/// Normalises `x` to `μ ∈ [1/4, 1)` by an even shift, seeds `r` linearly and takes four
/// Newton steps `r ← r(3 − μr²)/2` (common practice). `None` for `x = 0`.
pub fn inv_sqrt(x: u64) -> Option<(i64, i32)> {
    if x == 0 {
        return None;
    }
    let lz = x.leading_zeros() as i32;
    let s = lz & !1; // even shift: μ = x·2^s / 2^64 in [1/4, 1)
    let m = (x << s) >> 34; // μ in Q30
    let m = m as i64;
    // Seed: 1/sqrt(μ) ≈ 2.2 − 1.33μ on [1/4, 1) (within 12 %), Q30.
    let mut r: i64 = 2_362_232_013 - ((1_428_076_625 * m) >> 30);
    for _ in 0..4 {
        let r2 = (r * r) >> 30; // Q30
        let mr2 = (m * r2) >> 30; // Q30
        r = (r * ((3i64 << 30) - mr2)) >> 31;
    }
    // 1/sqrt(x) = 1/sqrt(μ·2^(64−s)) = r·2^-30·2^((s−64)/2).
    Some((r, (s - 64) / 2))
}

/// A positive factor as mantissa and exponent: value `mant · 2^(exp − 15)`, `mant` in
/// `[2^14, 2^15)` (zero: `mant = 0`). Designed in floating point at configuration time and
/// applied in integers.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Scaled {
    /// Mantissa, Q15.
    pub mant: i32,
    /// Binary exponent.
    pub exp: i32,
}

impl Scaled {
    /// The nearest `Scaled` of a finite, non-negative `v` (zero or invalid: zero).
    pub fn from_f64(v: f64) -> Self {
        if !(v.is_finite() && v > 0.0) {
            return Self { mant: 0, exp: 0 };
        }
        let mut exp = 0i32;
        let mut m = v;
        while m >= 1.0 {
            m *= 0.5;
            exp += 1;
        }
        while m < 0.5 {
            m *= 2.0;
            exp -= 1;
        }
        let mut mant = (m * 32768.0 + 0.5) as i32;
        if mant >= 32768 {
            mant >>= 1;
            exp += 1;
        }
        Self { mant, exp }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn log2_and_db_match_libm() {
        // Against libm's f64 log2 (a general-purpose reference): within 2 LSB of Q16, and
        // the dB form within 1 LSB of Q8 plus the log2 error.
        for x in [1u64, 2, 3, 5, 1000, 65_535, 1 << 40, u64::MAX, 123_456_789] {
            let want = libm::log2(x as f64) * 65536.0;
            let got = f64::from(log2_q16(x).unwrap());
            assert!((got - want).abs() <= 2.0, "log2 {x}: {got} vs {want}");
        }
        assert_eq!(log2_q16(0), None);
        for (a, b) in [(1000u64, 1u64), (1, 1000), (3, 7), (1 << 40, 5)] {
            let want = 10.0 * libm::log10(a as f64 / b as f64) * 256.0;
            let got = f64::from(ratio_db_q8(a, b).unwrap());
            assert!((got - want).abs() <= 1.0, "{a}/{b}: {got} vs {want}");
        }
    }

    #[test]
    fn reciprocal_and_inverse_root_are_accurate() {
        // Against f64 division and sqrt (IEEE 754, correctly rounded).
        for x in [1u32, 2, 3, 7, 1000, 65_535, 1 << 20, 123_456_789, u32::MAX] {
            let (r, s) = reciprocal(x).unwrap();
            let got = r as f64 * 2f64.powi(s - 30);
            assert!((got * x as f64 - 1.0).abs() < 4e-9, "1/{x}: {got}");
        }
        for x in [1u64, 2, 5, 1 << 33, 987_654_321_012, u64::MAX] {
            let (r, s) = inv_sqrt(x).unwrap();
            let got = r as f64 * 2f64.powi(s - 30);
            assert!(
                (got * (x as f64).sqrt() - 1.0).abs() < 4e-9,
                "1/sqrt {x}: {got}"
            );
        }
        assert_eq!(reciprocal(0), None);
        assert_eq!(shift_round(5, 1), 3);
        assert_eq!(shift_round(-5, 1), -3);
        assert_eq!(shift_round(3, -2), 12);
        let s = Scaled::from_f64(0.3);
        assert!((f64::from(s.mant) * 2f64.powi(s.exp - 15) - 0.3).abs() < 1e-4);
    }
}

/// `atan(2^-i)` in turns × 2^32 (`round(atan(2^-i)/(2π)·2^32)`, computed in f64 once and
/// written here), for [`atan2_turns`].
const CORDIC_ATAN: [u32; 24] = [
    536_870_912,
    316_933_406,
    167_458_907,
    85_004_756,
    42_667_331,
    21_354_465,
    10_679_838,
    5_340_245,
    2_670_163,
    1_335_087,
    667_544,
    333_772,
    166_886,
    83_443,
    41_722,
    20_861,
    10_430,
    5_215,
    2_608,
    1_304,
    652,
    326,
    163,
    81,
];

/// The angle of `(x, y)` as a fraction of a turn × 2^32 (wrapping `u32`: 2^31 is half a turn),
/// by 24 CORDIC vectoring iterations on 2^30-normalised inputs: error below 1e-6 turn (the
/// last table entry, 81·2^-32, plus rounding; common practice). Zero for `(0, 0)`.
pub fn atan2_turns(y: i64, x: i64) -> u32 {
    if x == 0 && y == 0 {
        return 0;
    }
    // Rotate into the right half-plane first (±90° steps are exact).
    let (mut x, mut y, mut angle): (i64, i64, u32) = if x >= 0 {
        (x, y, 0)
    } else if y >= 0 {
        (y, -x, 1 << 30) // rotated by −90°: add a quarter turn back
    } else {
        (-y, x, 3 << 30)
    };
    // Normalise so |x|, |y| < 2^30 (room for the shifts and additions).
    let big = x.unsigned_abs().max(y.unsigned_abs());
    let bits = 64 - big.leading_zeros() as i32;
    if bits > 30 {
        x >>= bits - 30;
        y >>= bits - 30;
    } else {
        x <<= 30 - bits;
        y <<= 30 - bits;
    }
    for (i, a) in CORDIC_ATAN.iter().enumerate() {
        let (dx, dy) = (y >> i, x >> i);
        if y > 0 {
            x += dx;
            y -= dy;
            angle = angle.wrapping_add(*a);
        } else {
            x -= dx;
            y += dy;
            angle = angle.wrapping_sub(*a);
        }
    }
    angle
}

#[cfg(test)]
mod cordic_tests {
    use super::*;

    #[test]
    fn atan2_matches_f64_within_a_microturn() {
        // Against f64 atan2 (IEEE 754 library), over the whole circle and several magnitudes.
        for i in 0..3600 {
            let th = i as f64 * core::f64::consts::TAU / 3600.0 + 0.0001;
            for mag in [3.0f64, 1000.0, 1e9, 1e15] {
                let (x, y) = ((mag * th.cos()) as i64, (mag * th.sin()) as i64);
                if x == 0 && y == 0 {
                    continue;
                }
                let want = (y as f64)
                    .atan2(x as f64)
                    .rem_euclid(core::f64::consts::TAU)
                    / core::f64::consts::TAU;
                let got = f64::from(atan2_turns(y, x)) / 2f64.powi(32);
                let mut d = (got - want).abs();
                d = d.min(1.0 - d);
                let tol = if mag < 10.0 { 0.05 } else { 1e-6 };
                assert!(d < tol, "θ {th} mag {mag}: {got} vs {want}");
            }
        }
    }
}
