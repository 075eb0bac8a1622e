-- A scoring view: encodings fitted on history, joined onto new rows, with the prior
-- for levels never seen before.
--   posterity -t appointments=demo/sample/appointments.csv -f sql/05_scoring_view.sql

CREATE TABLE breed_enc AS
SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM appointments WHERE day < 300 GROUP BY breed;
CREATE TABLE area_enc AS
SELECT postcode_area, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM appointments WHERE day < 300 GROUP BY postcode_area;

CREATE VIEW scored AS
SELECT a.appointment_id, a.breed, a.postcode_area,
       posterior_mean(COALESCE(b.p, beta_prior(2, 18)))        AS breed_no_show,
       posterior_mean(COALESCE(z.p, beta_prior(2, 18)))        AS area_no_show,
       posterior_quantile(COALESCE(z.p, beta_prior(2, 18)), 0.9) AS area_no_show_q90,
       z.p IS NULL                                              AS area_unseen
FROM appointments a
LEFT JOIN breed_enc b USING (breed)
LEFT JOIN area_enc z USING (postcode_area)
WHERE a.day >= 300;

SELECT area_unseen, COUNT(*) AS rows, round(AVG(area_no_show), 4) AS mean_area_encoding
FROM scored GROUP BY area_unseen ORDER BY area_unseen;
