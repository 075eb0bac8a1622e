//! Arbitrary priors and observations through every family: validation must reject
//! what is invalid, and nothing may panic or produce NaN from valid inputs.
#![no_main]

mod common;

use common::family::{
    BetaPosterior, BetaPrior, Conjugate, DirichletPosterior, DirichletPrior, GammaPosterior,
    GammaPrior, NigPosterior, NigPrior,
};
use common::{check_marginal, Input};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let mut i = Input(data);
    let which = i.byte() % 4;
    let (q, t) = (i.probability(), i.float());
    match which {
        0 => {
            let Ok(prior) = BetaPrior::new(i.float(), i.float()) else { return };
            let mut p = BetaPosterior::new(prior);
            let mut part = BetaPosterior::new(prior);
            for k in 0..(i.byte() % 16) {
                let (y, w) = (f64::from(i.byte() % 3), i.float());
                if p.observe(y, w).is_ok() && k % 2 == 0 {
                    part.observe(y, w).ok();
                }
            }
            check_marginal(&p.marginal(), q, t);
            if let Ok(rest) = p.subtract(&part) {
                check_marginal(&rest.marginal(), q, t);
            }
            if let Ok(s) = p.scale(i.float()) {
                check_marginal(&s.marginal(), q, t);
            }
            assert!(!p.log_marginal_likelihood().is_nan() || p.trials.is_infinite());
        }
        1 => {
            let Ok(prior) = GammaPrior::new(i.float(), i.float()) else { return };
            let mut p = GammaPosterior::new(prior);
            for _ in 0..(i.byte() % 16) {
                p.observe(i.float(), i.float()).ok();
            }
            if p.events.is_finite() && p.exposure.is_finite() {
                check_marginal(&p.marginal(), q, t);
            }
        }
        2 => {
            let Ok(prior) = NigPrior::new(i.float(), i.float(), i.float(), i.float()) else { return };
            let mut p = NigPosterior::new(prior);
            for _ in 0..(i.byte() % 16) {
                p.observe(i.float(), i.float()).ok();
            }
            let par = p.params();
            if [par.mu, par.kappa, par.alpha, par.beta].iter().all(|v| v.is_finite()) && par.beta > 0.0 {
                check_marginal(&p.marginal(), q, t);
            }
            p.without(i.float(), i.float()).ok();
        }
        _ => {
            let k = 1 + (i.byte() % 5) as usize;
            let classes: Vec<String> = (0..k).map(|c| format!("c{}", c + usize::from(i.byte() % 2))).collect();
            let alpha: Vec<f64> = (0..k).map(|_| i.float()).collect();
            let Ok(prior) = DirichletPrior::new(classes.clone(), alpha) else { return };
            let mut p = DirichletPosterior::new(prior);
            for _ in 0..(i.byte() % 16) {
                let c = format!("c{}", i.byte() % 6);
                p.observe(&c, i.float()).ok();
            }
            if p.counts.iter().all(|c| c.is_finite()) {
                for c in 0..k {
                    check_marginal(&p.marginal(c), q, t);
                }
            }
        }
    }
});
