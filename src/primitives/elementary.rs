//! Elementary functions written so that loops over arrays vectorise.
//!
//! The C library's `tanh` is a call per element that the compiler cannot
//! vectorise: over a 128 x 256 batch it took about as long as the layer's
//! matrix product. The forms here are branch-free (selects, a polynomial,
//! bit arithmetic for the power of two), so a loop over a slice becomes
//! vector code even at the baseline instruction set.
//!
//! `tanh(x) = sign(x) e / (e + 2)` with `e = expm1(2|x|)`, and `expm1(y)`
//! from `y = n ln 2 + r`, `|r| <= ln 2 / 2`:
//! `expm1(y) = 2^n expm1(r) + (2^n - 1)`, with `expm1(r)` from its Taylor
//! series (degree 7 for `f32`, 13 for `f64`: the first omitted term is below
//! half a unit in the last place of `r`). Near zero (`n = 0`) no reduction
//! error enters, so small arguments keep their relative accuracy; for large
//! `|x|` the argument is capped where `tanh` already rounds to 1.

/// One floating-point type's constants and bit arithmetic for its `tanh`.
macro_rules! vector_tanh {
    ($name:ident, $t:ty, $mantissa:expr, $bias:expr, $hi_mask:expr, $cap:expr, $degree:expr) => {
        /// `tanh(x)` without calls or branches (see the module's docs); NaN
        /// gives NaN, `±inf` gives `±1`, `-0` gives `-0`.
        #[inline]
        pub(crate) fn $name(x: $t) -> $t {
            // ln 2 in two parts: the high part has trailing zero bits, so
            // `n * LN2_HI` is exact for every `n` reached here.
            const LN2_HI: $t = <$t>::from_bits((std::f64::consts::LN_2 as $t).to_bits() & $hi_mask);
            const LN2_LO: $t = (std::f64::consts::LN_2 - LN2_HI as f64) as $t;
            const INV_LN2: $t = std::f64::consts::LOG2_E as $t;
            // 1.5 * 2^mantissa: adding it rounds to an integer without a
            // rounding instruction (which the baseline may lack), and leaves
            // that integer in the low bits of the sum.
            const ROUNDER: $t = 1.5 * (1u64 << $mantissa) as $t;
            let a = x.abs();
            // `>` so that NaN passes through (a `min` would make it the cap).
            let y = 2.0 * if a > $cap { $cap } else { a };
            let rounded = y * INV_LN2 + ROUNDER;
            let n = rounded - ROUNDER;
            let r = (y - n * LN2_HI) - n * LN2_LO;
            // expm1(r) = r (1 + r/2 (1 + r/3 (1 + ...))), from the inside out.
            let mut p: $t = 1.0;
            let mut k = $degree;
            while k > 1 {
                p = 1.0 + p * r * (1.0 / k as $t);
                k -= 1;
            }
            let expm1_r = r * p;
            // 2^n from n's bits (n >= 0). A NaN gives some power, and r
            // carries the NaN to the result.
            let n_bits = rounded.to_bits().wrapping_sub(ROUNDER.to_bits());
            let two_n = <$t>::from_bits(n_bits.wrapping_add($bias) << $mantissa);
            let e = two_n * expm1_r + (two_n - 1.0);
            (e / (e + 2.0)).copysign(x)
        }
    };
}

// The caps: f32's tanh rounds to 1 from x = 9.01, f64's from x = 19.06.
vector_tanh!(tanh_f32, f32, 23, 127, 0xffff_f000, 10.0, 7);
vector_tanh!(tanh_f64, f64, 52, 1023, 0xffff_ffff_0000_0000, 20.0, 13);

#[cfg(test)]
mod tests {
    use super::*;

    /// Units in the last place between `a` and `b`, both finite and of one sign.
    fn ulps32(a: f32, b: f32) -> u32 {
        (a.to_bits() as i64 - b.to_bits() as i64).unsigned_abs() as u32
    }

    #[test]
    fn f32_tanh_is_within_four_ulps_of_the_rounded_f64_tanh_over_the_whole_range() {
        // Every 1,021st bit pattern of the positive finite floats (about
        // 2 million values, every binade), and their negatives.
        let mut worst = (0, 0.0_f32);
        for bits in (0..0x7f80_0000_u32).step_by(1021) {
            let x = f32::from_bits(bits);
            // Reference: f64 tanh (correct to well under an f32 ulp), rounded.
            let reference = (x as f64).tanh() as f32;
            for x in [x, -x] {
                let r = reference.copysign(x);
                let d = ulps32(tanh_f32(x), r);
                if d > worst.0 {
                    worst = (d, x);
                }
            }
        }
        assert!(worst.0 <= 4, "{} ulps at x = {:e}", worst.0, worst.1);
    }

    #[test]
    fn f32_tanh_is_within_four_ulps_on_a_dense_sweep_of_where_it_bends() {
        let mut worst = (0, 0.0_f32);
        for i in -1_000_000..=1_000_000 {
            let x = i as f32 * 1e-5;
            let r = (x as f64).tanh() as f32;
            let d = ulps32(tanh_f32(x), r);
            if d > worst.0 {
                worst = (d, x);
            }
        }
        assert!(worst.0 <= 4, "{} ulps at x = {:e}", worst.0, worst.1);
    }

    /// The largest distance in ulps from the C library's tanh over `xs`
    /// and their negatives.
    fn worst_f64(xs: impl Iterator<Item = f64>) -> (u64, f64) {
        let mut worst = (0, 0.0_f64);
        for x in xs.filter(|x| x.is_finite()) {
            for x in [x, -x] {
                let d = (tanh_f64(x).to_bits() as i64 - x.tanh().to_bits() as i64).unsigned_abs();
                if d > worst.0 {
                    worst = (d, x);
                }
            }
        }
        worst
    }

    #[test]
    fn f64_tanh_is_within_four_ulps_of_the_c_library_tanh() {
        // The C library's tanh is within about 1 ulp itself (from memory).
        // Every binade of the positive finite doubles, then densely where
        // tanh bends.
        let step = 0x7ff0_0000_0000_0000_u64 / 2_000_000 + 1;
        let spread = worst_f64((0..2_000_000_u64).map(|i| f64::from_bits(i * step)));
        assert!(spread.0 <= 4, "{} ulps at x = {:e}", spread.0, spread.1);
        let dense = worst_f64((0..=2_000_000).map(|i| i as f64 * 1e-5));
        assert!(dense.0 <= 4, "{} ulps at x = {:e}", dense.0, dense.1);
    }

    #[test]
    fn special_values_follow_ieee_tanh() {
        for (x, want) in [
            (f64::INFINITY, 1.0),
            (f64::NEG_INFINITY, -1.0),
            (0.0, 0.0),
            (1e300, 1.0),
            (-25.0, -1.0),
        ] {
            assert_eq!(tanh_f64(x), want, "{x}");
            assert_eq!(tanh_f32(x as f32), want as f32, "{x}");
        }
        assert!(tanh_f64(f64::NAN).is_nan());
        assert!(tanh_f32(f32::NAN).is_nan());
        // The sign of zero is kept.
        assert!(tanh_f64(-0.0).is_sign_negative());
        assert!(tanh_f32(-0.0).is_sign_negative());
        // The smallest subnormal: tanh(x) = x there.
        assert_eq!(tanh_f64(5e-324), 5e-324);
        assert_eq!(tanh_f32(f32::from_bits(1)), f32::from_bits(1));
    }
}
