//! A natural logarithm that inlines into the solver's loops.
//!
//! The lane kernel ([`crate::lanes`]) takes one logarithm per species per
//! trial point for several cases at once, and a call into the C library
//! cannot be vectorised. [`ln_normal`] is the
//! classical argument reduction and rational approximation of the BSD
//! mathematical library (`x = 2^k m`, `m` in `[sqrt(2)/2, sqrt(2))`,
//! `ln m = 2 atanh(s)` with `s = (m - 1) / (m + 1)` and a minimax polynomial
//! in `s^2`), accurate to within one unit in the last place, for positive
//! normal finite arguments only: the caller guarantees that. It is written
//! without branches or integer-to-float conversions so that a loop over
//! lanes compiles to vector instructions.

// The published digits of the BSD library, kept as printed.
#[allow(clippy::excessive_precision)]
const LN2_HI: f64 = 6.931_471_803_691_238_164_90e-1;
#[allow(clippy::excessive_precision)]
const LN2_LO: f64 = 1.908_214_929_270_587_700_02e-10;
#[allow(clippy::excessive_precision)]
const LG1: f64 = 6.666_666_666_666_735_130e-1;
#[allow(clippy::excessive_precision)]
const LG2: f64 = 3.999_999_999_940_941_908e-1;
#[allow(clippy::excessive_precision)]
const LG3: f64 = 2.857_142_874_366_239_149e-1;
#[allow(clippy::excessive_precision)]
const LG4: f64 = 2.222_219_843_214_978_396e-1;
#[allow(clippy::excessive_precision)]
const LG5: f64 = 1.818_357_216_161_805_012e-1;
#[allow(clippy::excessive_precision)]
const LG6: f64 = 1.531_383_769_920_937_332e-1;
#[allow(clippy::excessive_precision)]
const LG7: f64 = 1.479_819_860_511_658_591e-1;

/// `ln x` for positive, normal, finite `x` (anything else gives garbage).
#[inline(always)]
pub(crate) fn ln_normal(x: f64) -> f64 {
    const MANTISSA: u64 = 0x000f_ffff_ffff_ffff;
    const TWO_52: f64 = 4_503_599_627_370_496.0;
    let bits = x.to_bits();
    // The biased exponent as a float, exactly: put it in the mantissa of 2^52.
    let biased = f64::from_bits((bits >> 52) | TWO_52.to_bits()) - TWO_52;
    let m1 = f64::from_bits((bits & MANTISSA) | 1.0_f64.to_bits()); // in [1, 2)
                                                                    // Fold m into [sqrt(2)/2, sqrt(2)).
    let big = m1 > std::f64::consts::SQRT_2;
    let m = if big { 0.5 * m1 } else { m1 };
    let k = biased - if big { 1022.0 } else { 1023.0 };
    let f = m - 1.0; // exact (Sterbenz)
    let s = f / (2.0 + f);
    let z = s * s;
    let w = z * z;
    let t1 = w * (LG2 + w * (LG4 + w * LG6));
    let t2 = z * (LG1 + w * (LG3 + w * (LG5 + w * LG7)));
    let r = t2 + t1;
    let hfsq = 0.5 * f * f;
    k * LN2_HI - ((hfsq - (s * (hfsq + r) + k * LN2_LO)) - f)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Distance in units of the last place between two positive-or-negative doubles.
    fn ulps(a: f64, b: f64) -> u64 {
        let key = |v: f64| {
            let b = v.to_bits() as i64;
            if b < 0 {
                i64::MIN - b
            } else {
                b
            }
        };
        (key(a) - key(b)).unsigned_abs()
    }

    #[test]
    fn agrees_with_the_system_logarithm_to_one_ulp() {
        // Reference: the C library's correctly rounded-or-nearly log (glibc
        // claims < 1 ulp); together at most 2 ulps apart, and exact at 1.
        assert_eq!(ln_normal(1.0), 0.0);
        assert_eq!(ln_normal(2.0), std::f64::consts::LN_2);
        let mut state = 0x9e37_79b9_7f4a_7c15_u64;
        let mut worst = 0;
        for _ in 0..2_000_000 {
            // xorshift64*: arguments spread over the whole normal range and
            // densely around 1, where cancellation would show.
            state ^= state >> 12;
            state ^= state << 25;
            state ^= state >> 27;
            let u = state.wrapping_mul(0x2545_f491_4f6c_dd1d);
            let x = if u & 1 == 0 {
                f64::from_bits(0x0010_0000_0000_0000 + (u >> 2) % 0x7fd0_0000_0000_0000)
            } else {
                1.0 + ((u >> 11) as f64 / (1u64 << 53) as f64 - 0.5) * 1e-3
            };
            worst = worst.max(ulps(ln_normal(x), x.ln()));
        }
        assert!(worst <= 1, "{worst} ulps");
        for x in [
            f64::MIN_POSITIVE,
            1e-300,
            1e-9,
            0.5,
            std::f64::consts::FRAC_1_SQRT_2,
            std::f64::consts::SQRT_2,
            1e300,
            f64::MAX,
        ] {
            assert!(ulps(ln_normal(x), x.ln()) <= 1, "{x:e}");
        }
    }
}
