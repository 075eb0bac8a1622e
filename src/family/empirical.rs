//! Empirical-Bayes priors fitted across levels (filled in below).
