-- An empirical-Bayes prior fitted from the levels themselves, then every level
-- re-priored with it (evidence is kept; only the prior changes).
--   posterity -t appointments=demo/sample/appointments.csv -f sql/09_fitted_prior.sql

CREATE TABLE area_fit AS
SELECT postcode_area, beta_posterior(no_show) AS p FROM appointments GROUP BY postcode_area;

-- What was chosen: parameters, strength in pseudo-observations, convergence.
SELECT fit_prior_report(p) AS report FROM area_fit;

CREATE TABLE area_prior AS SELECT fit_prior(p) AS prior FROM area_fit;

CREATE TABLE area_enc AS
SELECT postcode_area, posterior_with_prior(p, q.prior) AS p FROM area_fit CROSS JOIN area_prior q;

-- Unseen areas get the fitted prior itself.
SELECT round(posterior_mean(prior), 4) AS prior_mean, round(posterior_data_weight(prior), 1) AS prior_evidence
FROM area_prior;
