-- As-of (time-ordered) encodings: a row sees only earlier rows of its level.
--   posterity -t appointments=demo/sample/appointments.csv -f sql/04_as_of.sql

-- Everything before the row (ties broken by appointment_id).
CREATE TABLE as_of AS
SELECT appointment_id, breed, day, no_show,
       posterior_mean(beta_posterior(no_show, beta_prior(2, 18)) OVER (
         PARTITION BY breed ORDER BY day, appointment_id
         ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)) AS breed_no_show_so_far,
       -- A sliding window: the previous 30 days only (same-day rows excluded).
       posterior_mean(beta_posterior(no_show, beta_prior(2, 18)) OVER (
         PARTITION BY breed ORDER BY day
         RANGE BETWEEN 30 PRECEDING AND 1 PRECEDING)) AS breed_no_show_last_30_days
FROM appointments;

SELECT round(corr(breed_no_show_so_far, no_show), 4) AS corr_as_of,
       round(corr(breed_no_show_last_30_days, no_show), 4) AS corr_last_30_days
FROM as_of;
