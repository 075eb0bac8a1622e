-- As-of (time-ordered) encodings: a row sees only rows of its level from strictly
-- earlier days, so bookings on the same day get the same encoding and never see
-- each other's outcomes. A row with no earlier rows gets the prior itself.
--   posterity -t appointments=demo/sample/appointments.csv -f sql/04_as_of.sql

CREATE TABLE as_of AS
SELECT appointment_id, breed, day, no_show,
       -- Every earlier day: a RANGE frame that ends one day before the row's own.
       posterior_mean(beta_posterior(no_show, beta_prior(2, 18)) OVER (
         PARTITION BY breed ORDER BY day
         RANGE BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)) AS breed_no_show_so_far,
       -- A sliding window: the previous 30 days only (same-day rows excluded).
       posterior_mean(beta_posterior(no_show, beta_prior(2, 18)) OVER (
         PARTITION BY breed ORDER BY day
         RANGE BETWEEN 30 PRECEDING AND 1 PRECEDING)) AS breed_no_show_last_30_days
FROM appointments;

-- At scale, as encode does it: fit once per breed and day, then pool each breed's
-- earlier days in one pass with the window function posterior_pool_before (a day
-- reads only strictly earlier days; a breed's first day reads nothing, hence the
-- COALESCE with the prior). Joined back, it gives the first column's numbers.
CREATE TABLE breed_days AS
SELECT breed, day,
       COALESCE(posterior_pool_before(p, day) OVER (PARTITION BY breed ORDER BY day),
                beta_prior(2, 18)) AS so_far
FROM (SELECT breed, day, beta_posterior(no_show, beta_prior(2, 18)) AS p
      FROM appointments GROUP BY breed, day);

SELECT round(corr(breed_no_show_so_far, no_show), 4) AS corr_as_of,
       round(corr(breed_no_show_last_30_days, no_show), 4) AS corr_last_30_days,
       max(abs(posterior_mean(d.so_far) - a.breed_no_show_so_far)) AS pooled_days_difference
FROM as_of a JOIN breed_days d USING (breed, day);
