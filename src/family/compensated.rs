//! Order-independent sums: double-double ("compensated") accumulation.
//!
//! A hash aggregate adds rows and merges partial states in an order that depends
//! on the thread count and on how the input was split, and plain f64 sums change
//! in their last bits with that order. A [`Dd`] keeps the running sum as an
//! unevaluated pair `hi + lo` whose every addition is error-free
//! (Knuth's TwoSum), so:
//!
//! * when the exact sum's binary digits span at most about 100 bits (for example
//!   n ≤ 2^40 terms whose exponents lie within about 60 binades of each other —
//!   counts, 0/1 outcomes, weights, exposures, values of one scale) every
//!   partial sum is exact and the rounded result is the same in any order;
//! * otherwise the error is below 2^-100 of the sum of magnitudes, so two orders
//!   round to the same f64 unless the exact sum lies that close to a rounding
//!   boundary.
//!
//! Products are split exactly with Dekker's algorithm (no fused multiply-add is
//! assumed of the target). Reference: T. J. Dekker, "A floating-point technique
//! for extending the available precision", Numer. Math. 18 (1971); D. E. Knuth,
//! TAOCP vol. 2, 4.2.2 (TwoSum).

/// A double-double number `hi + lo` with `|lo| <= ulp(hi) / 2`.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Dd {
    pub hi: f64,
    pub lo: f64,
}

/// Error-free sum: `a + b = s + e` exactly.
#[inline]
pub fn two_sum(a: f64, b: f64) -> (f64, f64) {
    let s = a + b;
    let bb = s - a;
    let e = (a - (s - bb)) + (b - bb);
    (s, e)
}

/// Error-free sum when `|a| >= |b|` (or a is zero).
#[inline]
fn fast_two_sum(a: f64, b: f64) -> (f64, f64) {
    let s = a + b;
    (s, b - (s - a))
}

/// Dekker's split of `a` into two halves of 26 bits each.
#[inline]
fn split(a: f64) -> (f64, f64) {
    const FACTOR: f64 = 134_217_729.0; // 2^27 + 1
    let c = FACTOR * a;
    let hi = c - (c - a);
    (hi, a - hi)
}

/// Error-free product: `a * b = p + e` exactly (barring overflow and underflow).
#[inline]
pub fn two_prod(a: f64, b: f64) -> Dd {
    let p = a * b;
    if !p.is_finite() {
        return Dd { hi: p, lo: 0.0 };
    }
    let (ah, al) = split(a);
    let (bh, bl) = split(b);
    let e = ((ah * bh - p) + ah * bl + al * bh) + al * bl;
    Dd { hi: p, lo: e }
}

impl Dd {
    pub const ZERO: Dd = Dd { hi: 0.0, lo: 0.0 };

    pub fn new(x: f64) -> Dd {
        Dd { hi: x, lo: 0.0 }
    }

    /// The nearest f64.
    #[inline]
    pub fn value(self) -> f64 {
        self.hi + self.lo
    }

    /// `self + x`, accurate to 2^-105 relative (exact when the result fits).
    #[inline]
    pub fn add_f64(self, x: f64) -> Dd {
        let (s, e) = two_sum(self.hi, x);
        let (hi, lo) = fast_two_sum(s, e + self.lo);
        Dd { hi, lo }
    }

    /// Add (or remove) `x` in place in a `[hi, lo]` slot pair.
    #[inline]
    pub fn accumulate(slot: &mut [f64], x: f64) {
        let d = Dd {
            hi: slot[0],
            lo: slot[1],
        }
        .add_f64(x);
        slot[0] = d.hi;
        slot[1] = d.lo;
    }

    /// Add a double-double in place in a `[hi, lo]` slot pair.
    #[inline]
    pub fn accumulate_dd(slot: &mut [f64], x: Dd) {
        let d = Dd {
            hi: slot[0],
            lo: slot[1],
        } + x;
        slot[0] = d.hi;
        slot[1] = d.lo;
    }

    /// The double-double stored in a `[hi, lo]` slot pair.
    #[inline]
    pub fn from_slot(slot: &[f64]) -> Dd {
        Dd {
            hi: slot[0],
            lo: slot[1],
        }
    }
}

impl std::ops::Add for Dd {
    type Output = Dd;
    /// Both parts added error-free before renormalising.
    #[inline]
    fn add(self, other: Dd) -> Dd {
        let (s, e) = two_sum(self.hi, other.hi);
        let (t, f) = two_sum(self.lo, other.lo);
        let (s, e) = fast_two_sum(s, e + t);
        let (hi, lo) = fast_two_sum(s, e + f);
        Dd { hi, lo }
    }
}

impl std::ops::Neg for Dd {
    type Output = Dd;
    fn neg(self) -> Dd {
        Dd {
            hi: -self.hi,
            lo: -self.lo,
        }
    }
}

impl std::ops::Sub for Dd {
    type Output = Dd;
    fn sub(self, other: Dd) -> Dd {
        self + (-other)
    }
}

impl std::ops::Mul for Dd {
    type Output = Dd;
    /// Accurate to about 2^-104 relative.
    fn mul(self, other: Dd) -> Dd {
        let p = two_prod(self.hi, other.hi);
        let lo = p.lo + (self.hi * other.lo + self.lo * other.hi);
        let (hi, lo) = fast_two_sum(p.hi, lo);
        Dd { hi, lo }
    }
}

impl std::ops::Div for Dd {
    type Output = Dd;
    /// Accurate to about 2^-104 relative; `other` must be non-zero.
    fn div(self, other: Dd) -> Dd {
        let q1 = self.hi / other.hi;
        let r = self - other * Dd::new(q1);
        let q2 = r.hi / other.hi;
        let (hi, lo) = fast_two_sum(q1, q2);
        Dd { hi, lo }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::family::rng::SplitMix;

    fn shuffled(values: &[f64], seed: u64) -> Vec<f64> {
        let mut v = values.to_vec();
        let mut rng = SplitMix(seed);
        for i in (1..v.len()).rev() {
            let j = rng.below(i + 1);
            v.swap(i, j);
        }
        v
    }

    fn sum(values: &[f64]) -> f64 {
        values.iter().fold(Dd::ZERO, |s, &x| s.add_f64(x)).value()
    }

    #[test]
    fn sums_do_not_depend_on_order_or_split() {
        // Decay-style weights spanning twenty binades: plain f64 sums of these
        // differ between orders in the last bits (checked below), compensated ones
        // must not.
        let mut rng = SplitMix(7);
        let values: Vec<f64> = (0..100_000)
            .map(|_| (rng.unit() * 14.0).exp2().recip() * (1.0 + rng.unit()))
            .collect();
        let reference = sum(&values);
        let mut plain_differs = false;
        for seed in 1..20 {
            let v = shuffled(&values, seed);
            assert_eq!(sum(&v).to_bits(), reference.to_bits());
            // Split into two partial sums merged in either order.
            let (a, b) = v.split_at(seed as usize * 997);
            let pa = a.iter().fold(Dd::ZERO, |s, &x| s.add_f64(x));
            let pb = b.iter().fold(Dd::ZERO, |s, &x| s.add_f64(x));
            assert_eq!((pa + pb).value().to_bits(), reference.to_bits());
            assert_eq!((pb + pa).value().to_bits(), reference.to_bits());
            plain_differs |= v.iter().sum::<f64>() != values.iter().sum::<f64>();
        }
        assert!(
            plain_differs,
            "the data must be able to expose order dependence"
        );
    }

    #[test]
    fn products_are_exact() {
        // 0.1 * 0.1: the exact product of the two doubles, by hand with integers:
        // 0.1 = 3602879701896397 / 2^55.
        let p = two_prod(0.1, 0.1);
        let m: u128 = 3_602_879_701_896_397;
        let exact = m * m; // / 2^110
        let hi = (p.hi * 2f64.powi(110)) as u128;
        let lo = (p.lo * 2f64.powi(110)) as i128;
        assert_eq!(hi as i128 + lo, exact as i128);
    }

    #[test]
    fn division_and_subtraction() {
        let third = Dd::new(1.0) / Dd::new(3.0);
        let back = third * Dd::new(3.0) - Dd::new(1.0);
        assert!(back.value().abs() < 1e-30);
    }
}
