-- Interaction keys (two columns together) and a per-class Dirichlet encoding spread
-- into columns.
--   posterity -t appointments=demo/sample/appointments.csv -f sql/07_interactions_and_classes.sql

CREATE TABLE breed_clinic_enc AS
SELECT breed || '|' || clinic AS breed_clinic, beta_posterior(no_show, beta_prior(2, 18)) AS p
FROM appointments GROUP BY breed || '|' || clinic;

CREATE TABLE clinic_outcome_enc AS
SELECT clinic,
       dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show', 'late_cancellation', 'rescheduled'], 1)) AS p
FROM appointments GROUP BY clinic;

SELECT a.appointment_id,
       posterior_mean(COALESCE(i.p, beta_prior(2, 18)))   AS breed_clinic_no_show,
       posterior_mean(c.p, 'attended')                    AS clinic_attended,
       posterior_mean(c.p, 'no_show')                     AS clinic_no_show,
       posterior_mean(c.p, 'late_cancellation')           AS clinic_late_cancellation,
       posterior_mean(c.p, 'rescheduled')                 AS clinic_rescheduled
FROM appointments a
LEFT JOIN breed_clinic_enc i ON i.breed_clinic = a.breed || '|' || a.clinic
LEFT JOIN clinic_outcome_enc c USING (clinic)
ORDER BY a.appointment_id LIMIT 5;
