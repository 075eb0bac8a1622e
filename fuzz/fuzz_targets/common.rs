// Shared helpers: the family code is compiled straight from the main crate's
// sources (it has no Arrow or DataFusion dependency), so fuzzing needs no engine build.
#[path = "../../src/family/mod.rs"]
#[allow(dead_code)]
pub mod family;

/// Reads f64s and bytes from fuzzer input.
pub struct Input<'a>(pub &'a [u8]);

impl Input<'_> {
    pub fn byte(&mut self) -> u8 {
        match self.0.split_first() {
            Some((b, rest)) => {
                self.0 = rest;
                *b
            }
            None => 0,
        }
    }

    /// Any f64 bit pattern, or (half the time) a "reasonable" value, so both
    /// hostile and realistic inputs are explored.
    pub fn float(&mut self) -> f64 {
        let mut b = [0u8; 8];
        for x in &mut b {
            *x = self.byte();
        }
        let raw = f64::from_le_bytes(b);
        if b[7] & 1 == 0 {
            raw
        } else {
            let u = (u64::from_le_bytes(b) >> 11) as f64 / (1u64 << 53) as f64;
            10f64.powf(u * 20.0 - 10.0)
        }
    }

    pub fn probability(&mut self) -> f64 {
        let v = self.float();
        if v.is_finite() { v.abs().fract() } else { v }
    }
}

/// Invariants every marginal reader must keep for valid parameters.
pub fn check_marginal(m: &family::Marginal, q: f64, t: f64) {
    // Readers refuse marginals beyond the supported range (an error, not a NaN).
    if m.check().is_err() {
        return;
    }
    let mean = m.mean();
    let var = m.var();
    assert!(!mean.is_nan(), "mean NaN for {m:?}");
    assert!(!var.is_nan() && var >= 0.0, "var {var} for {m:?}");
    if q > 0.0 && q < 1.0 {
        let x = m.quantile(q);
        assert!(!x.is_nan(), "quantile NaN for {m:?} at {q}");
        if let family::Marginal::Beta { .. } = m {
            assert!((0.0..=1.0).contains(&x), "beta quantile {x} out of range");
        }
        if let family::Marginal::Gamma { .. } = m {
            assert!(x >= 0.0, "gamma quantile {x} negative");
        }
    }
    if !t.is_nan() {
        let (lo, up) = m.tails(t);
        assert!((0.0..=1.0).contains(&lo) && (0.0..=1.0).contains(&up), "tails {lo} {up} for {m:?} at {t}");
        assert!((lo + up - 1.0).abs() < 1e-9, "tails do not sum to one: {lo} + {up} for {m:?} at {t}");
    }
}
