-- keys and folds (table)
CREATE OR REPLACE VIEW __keyed AS SELECT t.*, key_text(t."a""b") AS __k0, CASE WHEN t."naïve café" IS NOT NULL AND t."{y}" IS NOT NULL THEN concat(character_length(key_text(t."naïve café")), ':', key_text(t."naïve café"), '|', character_length(key_text(t."{y}")), ':', key_text(t."{y}")) END AS __k1, key_text(t."{y}") AS __k2, fold_of(t.__row, 5, 0) AS __fold FROM __encode_train_rows t;

-- fit a_b (table)
CREATE OR REPLACE TABLE __fit0 AS SELECT __k0 AS level, dirichlet_posterior(CAST(t."{class}" AS VARCHAR), dirichlet_prior(['{y}', 'a"b', 'naïve café', 'it''s'], 0.5)) AS p FROM __keyed t WHERE __k0 IS NOT NULL GROUP BY __k0;

-- prior a_b (table)
CREATE OR REPLACE TABLE __prior0 AS SELECT fit_prior(p) AS prior, fit_prior_report(p) AS report FROM __fit0;

-- encodings a_b (table)
CREATE OR REPLACE TABLE __enc0 AS SELECT level, p, posterior_mean(posterior_scale(p, 0.8), '{y}') AS "a_b__y__mean", posterior_mean(posterior_scale(p, 0.8), 'a"b') AS "a_b_a_b_mean", posterior_mean(posterior_scale(p, 0.8), 'naïve café') AS "a_b_naïve_café_mean", posterior_mean(posterior_scale(p, 0.8), 'it''s') AS "a_b_it_s_mean", posterior_quantile(posterior_scale(p, 0.8), '{y}', 0.05) AS "a_b__y__q05", posterior_quantile(posterior_scale(p, 0.8), 'a"b', 0.05) AS "a_b_a_b_q05", posterior_quantile(posterior_scale(p, 0.8), 'naïve café', 0.05) AS "a_b_naïve_café_q05", posterior_quantile(posterior_scale(p, 0.8), 'it''s', 0.05) AS "a_b_it_s_q05" FROM (SELECT f.level, posterior_with_prior(f.p, q.prior) AS p FROM __fit0 f CROSS JOIN __prior0 q);

-- prior readers a_b (table)
CREATE OR REPLACE TABLE __priorread0 AS SELECT prior, posterior_mean(prior, '{y}') AS "a_b__y__mean", posterior_mean(prior, 'a"b') AS "a_b_a_b_mean", posterior_mean(prior, 'naïve café') AS "a_b_naïve_café_mean", posterior_mean(prior, 'it''s') AS "a_b_it_s_mean", posterior_quantile(prior, '{y}', 0.05) AS "a_b__y__q05", posterior_quantile(prior, 'a"b', 0.05) AS "a_b_a_b_q05", posterior_quantile(prior, 'naïve café', 0.05) AS "a_b_naïve_café_q05", posterior_quantile(prior, 'it''s', 0.05) AS "a_b_it_s_q05" FROM __prior0;

-- largest levels a_b (table)
CREATE OR REPLACE TABLE __top0 AS SELECT level, rank FROM (SELECT level, row_number() OVER (ORDER BY posterior_data_weight(p) DESC, level) AS rank FROM __enc0) WHERE rank <= 20;

-- fold fits a_b (table)
CREATE OR REPLACE TABLE __foldfit0 AS SELECT __k0 AS level, __fold, dirichlet_posterior(CAST(t."{class}" AS VARCHAR), dirichlet_prior(['{y}', 'a"b', 'naïve café', 'it''s'], 0.5)) AS p FROM __keyed t WHERE __k0 IS NOT NULL GROUP BY __k0, __fold;

-- out-of-fold a_b (table)
CREATE OR REPLACE TABLE __train0 AS SELECT level, __fold, p, posterior_mean(p, '{y}') AS "a_b__y__mean", posterior_mean(p, 'a"b') AS "a_b_a_b_mean", posterior_mean(p, 'naïve café') AS "a_b_naïve_café_mean", posterior_mean(p, 'it''s') AS "a_b_it_s_mean", posterior_quantile(p, '{y}', 0.05) AS "a_b__y__q05", posterior_quantile(p, 'a"b', 0.05) AS "a_b_a_b_q05", posterior_quantile(p, 'naïve café', 0.05) AS "a_b_naïve_café_q05", posterior_quantile(p, 'it''s', 0.05) AS "a_b_it_s_q05" FROM (SELECT g.level, g.__fold, posterior_subtract(e.p, posterior_with_prior(g.p, q.prior)) AS p FROM __foldfit0 g JOIN __enc0 e ON e.level = g.level CROSS JOIN __prior0 q);

-- encodings/a_b (encodings/a_b)
SELECT e.level AS "a_b", e.p, e."a_b__y__mean", e."a_b_a_b_mean", e."a_b_naïve_café_mean", e."a_b_it_s_mean", e."a_b__y__q05", e."a_b_a_b_q05", e."a_b_naïve_café_q05", e."a_b_it_s_q05", ranked.rank AS top_rank FROM __enc0 e LEFT JOIN __top0 ranked ON ranked.level = e.level ORDER BY e.level;

-- fit naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __fit1 AS SELECT __k1 AS level, dirichlet_posterior(CAST(t."{class}" AS VARCHAR), dirichlet_prior(['{y}', 'a"b', 'naïve café', 'it''s'], 0.5)) AS p FROM __keyed t WHERE __k1 IS NOT NULL GROUP BY __k1;

-- prior naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __prior1 AS SELECT fit_prior(p) AS prior, fit_prior_report(p) AS report FROM __fit1;

-- encodings naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __enc1 AS SELECT level, p FROM (SELECT f.level, posterior_with_prior(f.p, q.prior) AS p FROM __fit1 f CROSS JOIN __prior1 q);

-- prior readers naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __priorread1 AS SELECT prior FROM __prior1;

-- largest levels naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __top1 AS SELECT level, rank FROM (SELECT level, row_number() OVER (ORDER BY posterior_data_weight(p) DESC, level) AS rank FROM __enc1) WHERE rank <= 0;

-- codes naïve_café_x__y_ (table)
CREATE OR REPLACE TABLE __code1 AS SELECT level, CAST(row_number() OVER (ORDER BY level) - 1 AS BIGINT) AS code FROM __fit1;

-- encodings/naïve_café_x__y_ (encodings/naïve_café_x__y_)
SELECT e.level AS "naïve_café_x__y_", e.p, c.code FROM __enc1 e LEFT JOIN __top1 ranked ON ranked.level = e.level LEFT JOIN __code1 c ON c.level = e.level ORDER BY e.level;

-- fit _y_ (table)
CREATE OR REPLACE TABLE __fit2 AS SELECT __k2 AS level, dirichlet_posterior(CAST(t."{class}" AS VARCHAR), dirichlet_prior(['{y}', 'a"b', 'naïve café', 'it''s'], 0.5)) AS p FROM __keyed t WHERE __k2 IS NOT NULL GROUP BY __k2;

-- prior _y_ (table)
CREATE OR REPLACE TABLE __prior2 AS SELECT fit_prior(p) AS prior, fit_prior_report(p) AS report FROM __fit2;

-- encodings _y_ (table)
CREATE OR REPLACE TABLE __enc2 AS SELECT level, p FROM (SELECT f.level, posterior_with_prior(f.p, q.prior) AS p FROM __fit2 f CROSS JOIN __prior2 q);

-- prior readers _y_ (table)
CREATE OR REPLACE TABLE __priorread2 AS SELECT prior FROM __prior2;

-- largest levels _y_ (table)
CREATE OR REPLACE TABLE __top2 AS SELECT level, rank FROM (SELECT level, row_number() OVER (ORDER BY posterior_data_weight(p) DESC, level) AS rank FROM __enc2) WHERE rank <= 3;

-- encodings/_y_ (encodings/_y_)
SELECT e.level AS "_y_", e.p, ranked.rank AS top_rank FROM __enc2 e LEFT JOIN __top2 ranked ON ranked.level = e.level ORDER BY e.level;

-- train_encoded (train_encoded)
SELECT t."a""b", t."naïve café", t."{y}", t."{class}", COALESCE(x0."a_b__y__mean", (SELECT "a_b__y__mean" FROM __priorread0)) AS "a_b__y__mean", COALESCE(x0."a_b_a_b_mean", (SELECT "a_b_a_b_mean" FROM __priorread0)) AS "a_b_a_b_mean", COALESCE(x0."a_b_naïve_café_mean", (SELECT "a_b_naïve_café_mean" FROM __priorread0)) AS "a_b_naïve_café_mean", COALESCE(x0."a_b_it_s_mean", (SELECT "a_b_it_s_mean" FROM __priorread0)) AS "a_b_it_s_mean", COALESCE(x0."a_b__y__q05", (SELECT "a_b__y__q05" FROM __priorread0)) AS "a_b__y__q05", COALESCE(x0."a_b_a_b_q05", (SELECT "a_b_a_b_q05" FROM __priorread0)) AS "a_b_a_b_q05", COALESCE(x0."a_b_naïve_café_q05", (SELECT "a_b_naïve_café_q05" FROM __priorread0)) AS "a_b_naïve_café_q05", COALESCE(x0."a_b_it_s_q05", (SELECT "a_b_it_s_q05" FROM __priorread0)) AS "a_b_it_s_q05", CAST(COALESCE(top0.rank, 0) = 1 AS INT) AS "a_b_top1", CAST(COALESCE(top0.rank, 0) = 2 AS INT) AS "a_b_top2", CAST(COALESCE(top0.rank, 0) = 3 AS INT) AS "a_b_top3", CAST(COALESCE(top0.rank, 0) = 4 AS INT) AS "a_b_top4", CAST(COALESCE(top0.rank, 0) = 5 AS INT) AS "a_b_top5", CAST(COALESCE(top0.rank, 0) = 6 AS INT) AS "a_b_top6", CAST(COALESCE(top0.rank, 0) = 7 AS INT) AS "a_b_top7", CAST(COALESCE(top0.rank, 0) = 8 AS INT) AS "a_b_top8", CAST(COALESCE(top0.rank, 0) = 9 AS INT) AS "a_b_top9", CAST(COALESCE(top0.rank, 0) = 10 AS INT) AS "a_b_top10", CAST(COALESCE(top0.rank, 0) = 11 AS INT) AS "a_b_top11", CAST(COALESCE(top0.rank, 0) = 12 AS INT) AS "a_b_top12", CAST(COALESCE(top0.rank, 0) = 13 AS INT) AS "a_b_top13", CAST(COALESCE(top0.rank, 0) = 14 AS INT) AS "a_b_top14", CAST(COALESCE(top0.rank, 0) = 15 AS INT) AS "a_b_top15", CAST(COALESCE(top0.rank, 0) = 16 AS INT) AS "a_b_top16", CAST(COALESCE(top0.rank, 0) = 17 AS INT) AS "a_b_top17", CAST(COALESCE(top0.rank, 0) = 18 AS INT) AS "a_b_top18", CAST(COALESCE(top0.rank, 0) = 19 AS INT) AS "a_b_top19", CAST(COALESCE(top0.rank, 0) = 20 AS INT) AS "a_b_top20", COALESCE(code1.code, -1) AS "naïve_café_x__y__code", CAST(COALESCE(top2.rank, 0) = 1 AS INT) AS "_y__top1", CAST(COALESCE(top2.rank, 0) = 2 AS INT) AS "_y__top2", CAST(COALESCE(top2.rank, 0) = 3 AS INT) AS "_y__top3" FROM __keyed t LEFT JOIN __train0 x0 ON x0.level = t.__k0 AND x0.__fold = t.__fold LEFT JOIN __top0 top0 ON top0.level = t.__k0 LEFT JOIN __top1 top1 ON top1.level = t.__k1 LEFT JOIN __code1 code1 ON code1.level = t.__k1 LEFT JOIN __top2 top2 ON top2.level = t.__k2 ORDER BY t.__row;

-- scoring keys (table)
CREATE OR REPLACE VIEW __scorekeyed AS SELECT t.*, key_text(t."a""b") AS __k0, CASE WHEN t."naïve café" IS NOT NULL AND t."{y}" IS NOT NULL THEN concat(character_length(key_text(t."naïve café")), ':', key_text(t."naïve café"), '|', character_length(key_text(t."{y}")), ':', key_text(t."{y}")) END AS __k1, key_text(t."{y}") AS __k2 FROM __encode_score_rows t;

-- unseen/a_b (unseen/a_b)
SELECT COUNT(*) AS rows, COUNT(t.__k0) AS rows_with_key, COUNT(t.__k0) FILTER (WHERE e.level IS NULL) AS unseen_rows, COUNT(DISTINCT t.__k0) FILTER (WHERE e.level IS NULL) AS unseen_levels FROM __scorekeyed t LEFT JOIN __enc0 e ON e.level = t.__k0;

-- unseen/naïve_café_x__y_ (unseen/naïve_café_x__y_)
SELECT COUNT(*) AS rows, COUNT(t.__k1) AS rows_with_key, COUNT(t.__k1) FILTER (WHERE e.level IS NULL) AS unseen_rows, COUNT(DISTINCT t.__k1) FILTER (WHERE e.level IS NULL) AS unseen_levels FROM __scorekeyed t LEFT JOIN __enc1 e ON e.level = t.__k1;

-- unseen/_y_ (unseen/_y_)
SELECT COUNT(*) AS rows, COUNT(t.__k2) AS rows_with_key, COUNT(t.__k2) FILTER (WHERE e.level IS NULL) AS unseen_rows, COUNT(DISTINCT t.__k2) FILTER (WHERE e.level IS NULL) AS unseen_levels FROM __scorekeyed t LEFT JOIN __enc2 e ON e.level = t.__k2;

-- scored (scored)
SELECT t."a""b", t."naïve café", t."{y}", COALESCE(e0."a_b__y__mean", (SELECT "a_b__y__mean" FROM __priorread0)) AS "a_b__y__mean", COALESCE(e0."a_b_a_b_mean", (SELECT "a_b_a_b_mean" FROM __priorread0)) AS "a_b_a_b_mean", COALESCE(e0."a_b_naïve_café_mean", (SELECT "a_b_naïve_café_mean" FROM __priorread0)) AS "a_b_naïve_café_mean", COALESCE(e0."a_b_it_s_mean", (SELECT "a_b_it_s_mean" FROM __priorread0)) AS "a_b_it_s_mean", COALESCE(e0."a_b__y__q05", (SELECT "a_b__y__q05" FROM __priorread0)) AS "a_b__y__q05", COALESCE(e0."a_b_a_b_q05", (SELECT "a_b_a_b_q05" FROM __priorread0)) AS "a_b_a_b_q05", COALESCE(e0."a_b_naïve_café_q05", (SELECT "a_b_naïve_café_q05" FROM __priorread0)) AS "a_b_naïve_café_q05", COALESCE(e0."a_b_it_s_q05", (SELECT "a_b_it_s_q05" FROM __priorread0)) AS "a_b_it_s_q05", CAST(COALESCE(top0.rank, 0) = 1 AS INT) AS "a_b_top1", CAST(COALESCE(top0.rank, 0) = 2 AS INT) AS "a_b_top2", CAST(COALESCE(top0.rank, 0) = 3 AS INT) AS "a_b_top3", CAST(COALESCE(top0.rank, 0) = 4 AS INT) AS "a_b_top4", CAST(COALESCE(top0.rank, 0) = 5 AS INT) AS "a_b_top5", CAST(COALESCE(top0.rank, 0) = 6 AS INT) AS "a_b_top6", CAST(COALESCE(top0.rank, 0) = 7 AS INT) AS "a_b_top7", CAST(COALESCE(top0.rank, 0) = 8 AS INT) AS "a_b_top8", CAST(COALESCE(top0.rank, 0) = 9 AS INT) AS "a_b_top9", CAST(COALESCE(top0.rank, 0) = 10 AS INT) AS "a_b_top10", CAST(COALESCE(top0.rank, 0) = 11 AS INT) AS "a_b_top11", CAST(COALESCE(top0.rank, 0) = 12 AS INT) AS "a_b_top12", CAST(COALESCE(top0.rank, 0) = 13 AS INT) AS "a_b_top13", CAST(COALESCE(top0.rank, 0) = 14 AS INT) AS "a_b_top14", CAST(COALESCE(top0.rank, 0) = 15 AS INT) AS "a_b_top15", CAST(COALESCE(top0.rank, 0) = 16 AS INT) AS "a_b_top16", CAST(COALESCE(top0.rank, 0) = 17 AS INT) AS "a_b_top17", CAST(COALESCE(top0.rank, 0) = 18 AS INT) AS "a_b_top18", CAST(COALESCE(top0.rank, 0) = 19 AS INT) AS "a_b_top19", CAST(COALESCE(top0.rank, 0) = 20 AS INT) AS "a_b_top20", COALESCE(code1.code, -1) AS "naïve_café_x__y__code", CAST(COALESCE(top2.rank, 0) = 1 AS INT) AS "_y__top1", CAST(COALESCE(top2.rank, 0) = 2 AS INT) AS "_y__top2", CAST(COALESCE(top2.rank, 0) = 3 AS INT) AS "_y__top3" FROM __scorekeyed t LEFT JOIN __enc0 e0 ON e0.level = t.__k0 LEFT JOIN __top0 top0 ON top0.level = t.__k0 LEFT JOIN __enc1 e1 ON e1.level = t.__k1 LEFT JOIN __top1 top1 ON top1.level = t.__k1 LEFT JOIN __code1 code1 ON code1.level = t.__k1 LEFT JOIN __enc2 e2 ON e2.level = t.__k2 LEFT JOIN __top2 top2 ON top2.level = t.__k2 ORDER BY t.__row;

