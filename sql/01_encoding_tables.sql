-- Encoding tables: one row per level with its posterior and chosen readers, saved as Parquet.
-- Run from an empty directory:
--   posterity -t appointments=demo/sample/appointments.csv -f sql/01_encoding_tables.sql
-- The prior Beta(2, 18) is centred on a 10 % no-show rate with the weight of 20 bookings
-- (see 09_fitted_prior.sql to fit it from the data instead).

COPY (
  SELECT breed, p,
         posterior_data_weight(p)          AS bookings,
         posterior_mean(p)              AS no_show_mean,
         posterior_sd(p)                AS no_show_sd,
         posterior_quantile(p, 0.05)    AS no_show_q05,
         posterior_quantile(p, 0.95)    AS no_show_q95
  FROM (SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) AS p
        FROM appointments GROUP BY breed)
  ORDER BY breed
) TO 'breed_enc.parquet' STORED AS PARQUET;

COPY (
  SELECT postcode_area, p, posterior_mean(p) AS no_show_mean, posterior_data_weight(p) AS bookings
  FROM (SELECT postcode_area, beta_posterior(no_show, beta_prior(2, 18)) AS p
        FROM appointments GROUP BY postcode_area)
  ORDER BY postcode_area
) TO 'area_enc.parquet' STORED AS PARQUET;

-- Read back: the riskiest breeds we are sure about (highest 5 % quantile).
SELECT breed, bookings, round(no_show_mean, 4) AS mean, round(no_show_q05, 4) AS q05
FROM 'breed_enc.parquet' ORDER BY no_show_q05 DESC LIMIT 5;
