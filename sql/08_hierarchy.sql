-- Hierarchical priors: region -> district -> postcode area. Each level's prior is
-- centred on its parent's posterior without the level's own bookings (so none counts
-- twice), with a strength per layer fitted by maximum marginal likelihood: a rare
-- postcode area is shrunk toward its district, a rare district toward its region, as
-- far as the data say the layers differ.
-- (Codes: region = first 3 characters of the postcode area, district = first 4.)
--   posterity -t appointments=demo/sample/appointments.csv -f sql/08_hierarchy.sql

CREATE TABLE booked AS
SELECT postcode_area, substr(postcode_area, 1, 4) AS district, substr(postcode_area, 1, 3) AS region, no_show
FROM appointments;

-- Regions under a fitted prior.
CREATE TABLE region_data AS
SELECT region, beta_posterior(no_show, beta_prior(1, 1)) AS p FROM booked GROUP BY region;
CREATE TABLE region_enc AS
SELECT region, posterior_with_prior(p, (SELECT fit_prior(p) FROM region_data)) AS p FROM region_data;

-- Districts under their region, with the layer's fitted strength.
CREATE TABLE district_data AS
SELECT district, region, beta_posterior(no_show, beta_prior(1, 1)) AS p FROM booked GROUP BY district, region;
CREATE TABLE district_strength AS
SELECT fit_strength(d.p, r.p, d.p) AS strength FROM district_data d JOIN region_enc r USING (region);
CREATE TABLE district_enc AS
SELECT d.district, posterior_under(d.p, r.p, d.p, s.strength) AS p
FROM district_data d JOIN region_enc r USING (region) CROSS JOIN district_strength s;

-- Postcode areas under their district.
CREATE TABLE area_data AS
SELECT postcode_area, district, beta_posterior(no_show, beta_prior(1, 1)) AS p FROM booked GROUP BY postcode_area, district;
CREATE TABLE area_strength AS
SELECT fit_strength(a.p, d.p, a.p) AS strength FROM area_data a JOIN district_enc d USING (district);
CREATE TABLE area_enc AS
SELECT a.postcode_area, a.district, posterior_under(a.p, d.p, a.p, s.strength) AS p
FROM area_data a JOIN district_enc d USING (district) CROSS JOIN area_strength s;

SELECT (SELECT round(strength, 1) FROM district_strength) AS district_strength,
       (SELECT round(strength, 1) FROM area_strength) AS area_strength;

SELECT a.postcode_area, posterior_data_weight(a.p) AS bookings,
       round(posterior_mean(a.p), 4) AS area, round(posterior_mean(d.p), 4) AS district
FROM area_enc a JOIN district_enc d USING (district)
ORDER BY posterior_data_weight(a.p), a.postcode_area LIMIT 5;
