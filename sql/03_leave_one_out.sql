-- Leave-one-out training encodings: remove the row's own outcome from its level's posterior.
-- Caution: within a level these values take one value per outcome, so they reveal each row's
-- own target to tree learners (README, "Leakage, measured"); `encode` refuses them. Use
-- out-of-fold (02) or as-of (04) encodings for anything that can split on a feature.
--   posterity -t appointments=demo/sample/appointments.csv -f sql/03_leave_one_out.sql

CREATE TABLE breed_total AS
SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM appointments GROUP BY breed;

CREATE TABLE training_loo AS
SELECT a.appointment_id, a.breed, a.no_show,
       posterior_mean(posterior_without(t.p, a.no_show)) AS breed_no_show_loo
FROM appointments a JOIN breed_total t USING (breed);

SELECT COUNT(*) AS rows, round(AVG(breed_no_show_loo), 4) AS mean_encoding FROM training_loo;
