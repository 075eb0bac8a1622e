-- Incremental refresh: yesterday's encoding table pooled with today's new rows equals
-- a full refit, without rereading history. Then a decayed refresh.
--   posterity -t appointments=demo/sample/appointments.csv -f sql/06_incremental_refresh.sql

CREATE TABLE enc_yesterday AS
SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM appointments WHERE day < 364 GROUP BY breed;

CREATE TABLE enc_today AS
SELECT breed, posterior_pool(p) AS p FROM (
  SELECT breed, p FROM enc_yesterday
  UNION ALL
  SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) FROM appointments WHERE day = 364 GROUP BY breed
) GROUP BY breed;

-- Check: identical to refitting on all rows.
SELECT MAX(ABS(posterior_mean(t.p) - posterior_mean(f.p))) AS max_difference_to_full_refit, COUNT(*) AS breeds
FROM enc_today t JOIN (SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM appointments GROUP BY breed) f USING (breed);

-- Decayed refresh: old evidence loses half its weight every 90 days. Refreshing daily
-- multiplies yesterday's evidence by 0.5^(1/90) before pooling today's rows; the
-- weighted fit below is the same thing computed from scratch.
CREATE TABLE enc_decayed AS
SELECT breed, beta_posterior(no_show, beta_prior(2, 18), decay_weight(364 - day, 90)) AS p
FROM appointments GROUP BY breed;

CREATE TABLE enc_decayed_incremental AS
SELECT breed, posterior_pool(p) AS p FROM (
  SELECT breed, posterior_scale(p, decay_weight(1, 90)) AS p FROM (
    SELECT breed, beta_posterior(no_show, beta_prior(2, 18), decay_weight(363 - day, 90)) AS p
    FROM appointments WHERE day < 364 GROUP BY breed)
  UNION ALL
  SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) FROM appointments WHERE day = 364 GROUP BY breed
) GROUP BY breed;

SELECT MAX(ABS(posterior_mean(a.p) - posterior_mean(b.p))) AS max_difference_decayed
FROM enc_decayed a JOIN enc_decayed_incremental b USING (breed);
