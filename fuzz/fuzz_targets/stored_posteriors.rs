//! Arbitrary stored field values, as a reader finds them in a Parquet column:
//! decoding must validate them, and readers must not panic or return NaN.
#![no_main]

mod common;

use common::family::{BetaPosterior, GammaPosterior, NigPosterior, NigPrior};
use common::{check_marginal, Input};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let mut i = Input(data);
    let which = i.byte() % 3;
    let (q, t) = (i.probability(), i.float());
    let f: Vec<f64> = (0..7).map(|_| i.float()).collect();
    let marginal = match which {
        0 => BetaPosterior::from_parts(f[0], f[1], f[2], f[3]).ok().map(|p| p.marginal()),
        1 => GammaPosterior::from_parts(f[0], f[1], f[2], f[3]).ok().map(|p| p.marginal()),
        _ => NigPrior::new(f[0], f[1], f[2], f[3])
            .ok()
            .and_then(|prior| NigPosterior::from_parts(prior, f[4], f[5], f[6]).ok())
            .map(|p| p.marginal()),
    };
    if let Some(m) = marginal {
        let finite = match m {
            common::family::Marginal::Beta { a, b } => a.is_finite() && b.is_finite(),
            common::family::Marginal::Gamma { shape, rate } => shape.is_finite() && rate.is_finite(),
            common::family::Marginal::StudentT { loc, scale, dof } => {
                loc.is_finite() && scale.is_finite() && scale > 0.0 && dof.is_finite()
            }
        };
        if finite {
            check_marginal(&m, q, t);
        }
    }
});
