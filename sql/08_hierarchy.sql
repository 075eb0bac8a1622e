-- Hierarchical priors: region -> district -> postcode area. A parent's posterior,
-- scaled to at most 50 pseudo-observations, becomes the child's prior, so a rare
-- postcode area is shrunk toward its district, and a rare district toward its region.
-- (Codes: region = first 3 characters of the postcode area, district = first 4.)
--   posterity -t appointments=demo/sample/appointments.csv -f sql/08_hierarchy.sql

CREATE TABLE region_enc AS
SELECT substr(postcode_area, 1, 3) AS region, beta_posterior(no_show, beta_prior(2, 18)) AS p
FROM appointments GROUP BY substr(postcode_area, 1, 3);

CREATE TABLE district_enc AS
SELECT d.district, d.region,
       posterior_with_prior(d.p, posterior_scale(r.p, least(1.0, 50.0 / greatest(posterior_data_weight(r.p), 1.0)))) AS p
FROM (SELECT substr(postcode_area, 1, 4) AS district, substr(postcode_area, 1, 3) AS region,
             beta_posterior(no_show, beta_prior(2, 18)) AS p
      FROM appointments GROUP BY substr(postcode_area, 1, 4), substr(postcode_area, 1, 3)) d
JOIN region_enc r USING (region);

CREATE TABLE area_enc AS
SELECT a.postcode_area, a.district,
       posterior_with_prior(a.p, posterior_scale(d.p, least(1.0, 50.0 / greatest(posterior_data_weight(d.p), 1.0)))) AS p
FROM (SELECT postcode_area, substr(postcode_area, 1, 4) AS district,
             beta_posterior(no_show, beta_prior(2, 18)) AS p
      FROM appointments GROUP BY postcode_area, substr(postcode_area, 1, 4)) a
JOIN district_enc d USING (district);

SELECT a.postcode_area, posterior_data_weight(a.p) AS bookings,
       round(posterior_mean(a.p), 4) AS area, round(posterior_mean(d.p), 4) AS district
FROM area_enc a JOIN district_enc d USING (district)
ORDER BY posterior_data_weight(a.p), a.postcode_area LIMIT 5;
