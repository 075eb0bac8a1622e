-- keys and folds (table)
CREATE OR REPLACE TABLE __keyed AS SELECT t.*, CAST(t."a""b" AS VARCHAR) AS __k0, CASE WHEN t."naïve café" IS NOT NULL AND t."{y}" IS NOT NULL THEN concat(character_length(CAST(t."naïve café" AS VARCHAR)), ':', CAST(t."naïve café" AS VARCHAR), '|', character_length(CAST(t."{y}" AS VARCHAR)), ':', CAST(t."{y}" AS VARCHAR)) END AS __k1, fold_of(t.__row, 5, 0) AS __fold FROM __encode_train_rows t;

-- fit a_b (table)
CREATE OR REPLACE TABLE __fit0 AS SELECT __k0 AS level, dirichlet_posterior(CAST(t."{class}" AS VARCHAR), dirichlet_prior(['{y}', 'a"b', 'naïve café', 'it''s'], 0.5)) AS p FROM __keyed t WHERE __k0 IS NOT NULL GROUP BY __k0;

-- prior a_b (table)
CREATE OR REPLACE TABLE __prior0 AS SELECT fit_prior(p) AS prior, fit_prior_report(p) AS report FROM __fit0;

-- encodings a_b (table)
CREATE OR REPLACE TABLE __enc0 AS SELECT level, p, posterior_mean(p, '{y}') AS "a_b__y__mean", posterior_mean(p, 'a"b') AS "a_b_a_b_mean", posterior_mean(p, 'naïve café') AS "a_b_naïve_café_mean", posterior_mean(p, 'it''s') AS "a_b_it_s_mean", posterior_quantile(p, '{y}', 0.05) AS "a_b__y__q05", posterior_quantile(p, 'a"b', 0.05) AS "a_b_a_b_q05", posterior_quantile(p, 'naïve café', 0.05) AS "a_b_naïve_café_q05", posterior_quantile(p, 'it''s', 0.05) AS "a_b_it_s_q05" FROM (SELECT f.level, posterior_with_prior(f.p, q.prior) AS p FROM __fit0 f CROSS JOIN __prior0 q);

-- prior readers a_b (table)
CREATE OR REPLACE TABLE __priorread0 AS SELECT prior, posterior_mean(prior, '{y}') AS "a_b__y__mean", posterior_mean(prior, 'a"b') AS "a_b_a_b_mean", posterior_mean(prior, 'naïve café') AS "a_b_naïve_café_mean", posterior_mean(prior, 'it''s') AS "a_b_it_s_mean", posterior_quantile(prior, '{y}', 0.05) AS "a_b__y__q05", posterior_quantile(prior, 'a"b', 0.05) AS "a_b_a_b_q05", posterior_quantile(prior, 'naïve café', 0.05) AS "a_b_naïve_café_q05", posterior_quantile(prior, 'it''s', 0.05) AS "a_b_it_s_q05" FROM __prior0;

-- fold fits a_b (table)
CREATE OR REPLACE TABLE __foldfit0 AS SELECT __k0 AS level, __fold, dirichlet_posterior(CAST(t."{class}" AS VARCHAR), dirichlet_prior(['{y}', 'a"b', 'naïve café', 'it''s'], 0.5)) AS p FROM __keyed t WHERE __k0 IS NOT NULL GROUP BY __k0, __fold;

-- out-of-fold a_b (table)
CREATE OR REPLACE TABLE __train0 AS SELECT level, __fold, p, posterior_mean(p, '{y}') AS "a_b__y__mean", posterior_mean(p, 'a"b') AS "a_b_a_b_mean", posterior_mean(p, 'naïve café') AS "a_b_naïve_café_mean", posterior_mean(p, 'it''s') AS "a_b_it_s_mean", posterior_quantile(p, '{y}', 0.05) AS "a_b__y__q05", posterior_quantile(p, 'a"b', 0.05) AS "a_b_a_b_q05", posterior_quantile(p, 'naïve café', 0.05) AS "a_b_naïve_café_q05", posterior_quantile(p, 'it''s', 0.05) AS "a_b_it_s_q05" FROM (SELECT g.level, g.__fold, posterior_subtract(e.p, posterior_with_prior(g.p, q.prior)) AS p FROM __foldfit0 g JOIN __enc0 e ON e.level = g.level CROSS JOIN __prior0 q);

-- encodings/a_b (encodings/a_b)
SELECT level AS "a_b", p, "a_b__y__mean", "a_b_a_b_mean", "a_b_naïve_café_mean", "a_b_it_s_mean", "a_b__y__q05", "a_b_a_b_q05", "a_b_naïve_café_q05", "a_b_it_s_q05" FROM __enc0 ORDER BY level;

-- fit naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __fit1 AS SELECT __k1 AS level, dirichlet_posterior(CAST(t."{class}" AS VARCHAR), dirichlet_prior(['{y}', 'a"b', 'naïve café', 'it''s'], 0.5)) AS p FROM __keyed t WHERE __k1 IS NOT NULL GROUP BY __k1;

-- prior naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __prior1 AS SELECT fit_prior(p) AS prior, fit_prior_report(p) AS report FROM __fit1;

-- encodings naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __enc1 AS SELECT level, p, posterior_mean(p, '{y}') AS "naïve_café_x__y___y__mean", posterior_mean(p, 'a"b') AS "naïve_café_x__y__a_b_mean", posterior_mean(p, 'naïve café') AS "naïve_café_x__y__naïve_café_mean", posterior_mean(p, 'it''s') AS "naïve_café_x__y__it_s_mean", posterior_quantile(p, '{y}', 0.05) AS "naïve_café_x__y___y__q05", posterior_quantile(p, 'a"b', 0.05) AS "naïve_café_x__y__a_b_q05", posterior_quantile(p, 'naïve café', 0.05) AS "naïve_café_x__y__naïve_café_q05", posterior_quantile(p, 'it''s', 0.05) AS "naïve_café_x__y__it_s_q05" FROM (SELECT f.level, posterior_with_prior(f.p, q.prior) AS p FROM __fit1 f CROSS JOIN __prior1 q);

-- prior readers naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __priorread1 AS SELECT prior, posterior_mean(prior, '{y}') AS "naïve_café_x__y___y__mean", posterior_mean(prior, 'a"b') AS "naïve_café_x__y__a_b_mean", posterior_mean(prior, 'naïve café') AS "naïve_café_x__y__naïve_café_mean", posterior_mean(prior, 'it''s') AS "naïve_café_x__y__it_s_mean", posterior_quantile(prior, '{y}', 0.05) AS "naïve_café_x__y___y__q05", posterior_quantile(prior, 'a"b', 0.05) AS "naïve_café_x__y__a_b_q05", posterior_quantile(prior, 'naïve café', 0.05) AS "naïve_café_x__y__naïve_café_q05", posterior_quantile(prior, 'it''s', 0.05) AS "naïve_café_x__y__it_s_q05" FROM __prior1;

-- fold fits naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __foldfit1 AS SELECT __k1 AS level, __fold, dirichlet_posterior(CAST(t."{class}" AS VARCHAR), dirichlet_prior(['{y}', 'a"b', 'naïve café', 'it''s'], 0.5)) AS p FROM __keyed t WHERE __k1 IS NOT NULL GROUP BY __k1, __fold;

-- out-of-fold naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __train1 AS SELECT level, __fold, p, posterior_mean(p, '{y}') AS "naïve_café_x__y___y__mean", posterior_mean(p, 'a"b') AS "naïve_café_x__y__a_b_mean", posterior_mean(p, 'naïve café') AS "naïve_café_x__y__naïve_café_mean", posterior_mean(p, 'it''s') AS "naïve_café_x__y__it_s_mean", posterior_quantile(p, '{y}', 0.05) AS "naïve_café_x__y___y__q05", posterior_quantile(p, 'a"b', 0.05) AS "naïve_café_x__y__a_b_q05", posterior_quantile(p, 'naïve café', 0.05) AS "naïve_café_x__y__naïve_café_q05", posterior_quantile(p, 'it''s', 0.05) AS "naïve_café_x__y__it_s_q05" FROM (SELECT g.level, g.__fold, posterior_subtract(e.p, posterior_with_prior(g.p, q.prior)) AS p FROM __foldfit1 g JOIN __enc1 e ON e.level = g.level CROSS JOIN __prior1 q);

-- encodings/naïve_café_x__y_ (encodings/naïve_café_x__y_)
SELECT level AS "naïve_café_x__y_", p, "naïve_café_x__y___y__mean", "naïve_café_x__y__a_b_mean", "naïve_café_x__y__naïve_café_mean", "naïve_café_x__y__it_s_mean", "naïve_café_x__y___y__q05", "naïve_café_x__y__a_b_q05", "naïve_café_x__y__naïve_café_q05", "naïve_café_x__y__it_s_q05" FROM __enc1 ORDER BY level;

-- train_encoded (train_encoded)
SELECT t."a""b", t."naïve café", t."{y}", t."{class}", COALESCE(x0."a_b__y__mean", r0."a_b__y__mean") AS "a_b__y__mean", COALESCE(x0."a_b_a_b_mean", r0."a_b_a_b_mean") AS "a_b_a_b_mean", COALESCE(x0."a_b_naïve_café_mean", r0."a_b_naïve_café_mean") AS "a_b_naïve_café_mean", COALESCE(x0."a_b_it_s_mean", r0."a_b_it_s_mean") AS "a_b_it_s_mean", COALESCE(x0."a_b__y__q05", r0."a_b__y__q05") AS "a_b__y__q05", COALESCE(x0."a_b_a_b_q05", r0."a_b_a_b_q05") AS "a_b_a_b_q05", COALESCE(x0."a_b_naïve_café_q05", r0."a_b_naïve_café_q05") AS "a_b_naïve_café_q05", COALESCE(x0."a_b_it_s_q05", r0."a_b_it_s_q05") AS "a_b_it_s_q05", COALESCE(x1."naïve_café_x__y___y__mean", r1."naïve_café_x__y___y__mean") AS "naïve_café_x__y___y__mean", COALESCE(x1."naïve_café_x__y__a_b_mean", r1."naïve_café_x__y__a_b_mean") AS "naïve_café_x__y__a_b_mean", COALESCE(x1."naïve_café_x__y__naïve_café_mean", r1."naïve_café_x__y__naïve_café_mean") AS "naïve_café_x__y__naïve_café_mean", COALESCE(x1."naïve_café_x__y__it_s_mean", r1."naïve_café_x__y__it_s_mean") AS "naïve_café_x__y__it_s_mean", COALESCE(x1."naïve_café_x__y___y__q05", r1."naïve_café_x__y___y__q05") AS "naïve_café_x__y___y__q05", COALESCE(x1."naïve_café_x__y__a_b_q05", r1."naïve_café_x__y__a_b_q05") AS "naïve_café_x__y__a_b_q05", COALESCE(x1."naïve_café_x__y__naïve_café_q05", r1."naïve_café_x__y__naïve_café_q05") AS "naïve_café_x__y__naïve_café_q05", COALESCE(x1."naïve_café_x__y__it_s_q05", r1."naïve_café_x__y__it_s_q05") AS "naïve_café_x__y__it_s_q05" FROM __keyed t LEFT JOIN __train0 x0 ON x0.level = t.__k0 AND x0.__fold = t.__fold CROSS JOIN __priorread0 r0 LEFT JOIN __train1 x1 ON x1.level = t.__k1 AND x1.__fold = t.__fold CROSS JOIN __priorread1 r1 ORDER BY t.__row;

-- scoring keys (table)
CREATE OR REPLACE TABLE __scorekeyed AS SELECT t.*, CAST(t."a""b" AS VARCHAR) AS __k0, CASE WHEN t."naïve café" IS NOT NULL AND t."{y}" IS NOT NULL THEN concat(character_length(CAST(t."naïve café" AS VARCHAR)), ':', CAST(t."naïve café" AS VARCHAR), '|', character_length(CAST(t."{y}" AS VARCHAR)), ':', CAST(t."{y}" AS VARCHAR)) END AS __k1 FROM __encode_score_rows t;

-- unseen/a_b (unseen/a_b)
SELECT COUNT(*) AS rows, COUNT(t.__k0) AS rows_with_key, COUNT(t.__k0) FILTER (WHERE e.level IS NULL) AS unseen_rows, COUNT(DISTINCT t.__k0) FILTER (WHERE e.level IS NULL) AS unseen_levels FROM __scorekeyed t LEFT JOIN __enc0 e ON e.level = t.__k0;

-- unseen/naïve_café_x__y_ (unseen/naïve_café_x__y_)
SELECT COUNT(*) AS rows, COUNT(t.__k1) AS rows_with_key, COUNT(t.__k1) FILTER (WHERE e.level IS NULL) AS unseen_rows, COUNT(DISTINCT t.__k1) FILTER (WHERE e.level IS NULL) AS unseen_levels FROM __scorekeyed t LEFT JOIN __enc1 e ON e.level = t.__k1;

-- scored (scored)
SELECT t."a""b", t."naïve café", t."{y}", COALESCE(e0."a_b__y__mean", r0."a_b__y__mean") AS "a_b__y__mean", COALESCE(e0."a_b_a_b_mean", r0."a_b_a_b_mean") AS "a_b_a_b_mean", COALESCE(e0."a_b_naïve_café_mean", r0."a_b_naïve_café_mean") AS "a_b_naïve_café_mean", COALESCE(e0."a_b_it_s_mean", r0."a_b_it_s_mean") AS "a_b_it_s_mean", COALESCE(e0."a_b__y__q05", r0."a_b__y__q05") AS "a_b__y__q05", COALESCE(e0."a_b_a_b_q05", r0."a_b_a_b_q05") AS "a_b_a_b_q05", COALESCE(e0."a_b_naïve_café_q05", r0."a_b_naïve_café_q05") AS "a_b_naïve_café_q05", COALESCE(e0."a_b_it_s_q05", r0."a_b_it_s_q05") AS "a_b_it_s_q05", COALESCE(e1."naïve_café_x__y___y__mean", r1."naïve_café_x__y___y__mean") AS "naïve_café_x__y___y__mean", COALESCE(e1."naïve_café_x__y__a_b_mean", r1."naïve_café_x__y__a_b_mean") AS "naïve_café_x__y__a_b_mean", COALESCE(e1."naïve_café_x__y__naïve_café_mean", r1."naïve_café_x__y__naïve_café_mean") AS "naïve_café_x__y__naïve_café_mean", COALESCE(e1."naïve_café_x__y__it_s_mean", r1."naïve_café_x__y__it_s_mean") AS "naïve_café_x__y__it_s_mean", COALESCE(e1."naïve_café_x__y___y__q05", r1."naïve_café_x__y___y__q05") AS "naïve_café_x__y___y__q05", COALESCE(e1."naïve_café_x__y__a_b_q05", r1."naïve_café_x__y__a_b_q05") AS "naïve_café_x__y__a_b_q05", COALESCE(e1."naïve_café_x__y__naïve_café_q05", r1."naïve_café_x__y__naïve_café_q05") AS "naïve_café_x__y__naïve_café_q05", COALESCE(e1."naïve_café_x__y__it_s_q05", r1."naïve_café_x__y__it_s_q05") AS "naïve_café_x__y__it_s_q05" FROM __scorekeyed t LEFT JOIN __enc0 e0 ON e0.level = t.__k0 CROSS JOIN __priorread0 r0 LEFT JOIN __enc1 e1 ON e1.level = t.__k1 CROSS JOIN __priorread1 r1 ORDER BY t.__row;

