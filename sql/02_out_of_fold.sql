-- K-fold out-of-fold training encodings: each row's encoding comes from the other
-- folds only (total posterior minus its own fold's), so it never saw its own target.
--   posterity -t appointments=demo/sample/appointments.csv -f sql/02_out_of_fold.sql

CREATE TABLE folded AS SELECT *, fold_of(appointment_id, 5) AS fold FROM appointments;

CREATE TABLE breed_total AS
SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM folded GROUP BY breed;

CREATE TABLE breed_per_fold AS
SELECT breed, fold, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM folded GROUP BY breed, fold;

CREATE TABLE training AS
SELECT f.appointment_id, f.breed, f.fold, f.no_show,
       posterior_mean(posterior_subtract(t.p, k.p)) AS breed_no_show_oof,
       posterior_mean(t.p)                          AS breed_no_show_in_sample
FROM folded f
JOIN breed_total t USING (breed)
JOIN breed_per_fold k ON k.breed = f.breed AND k.fold = f.fold;

-- The in-sample column leaks; the out-of-fold one does not.
SELECT round(corr(breed_no_show_in_sample, no_show), 4) AS corr_in_sample,
       round(corr(breed_no_show_oof, no_show), 4)       AS corr_out_of_fold
FROM training;
