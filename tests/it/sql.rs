//! SQL-level tests of the registered functions on small tables.

use datafusion::arrow::array::{Array, AsArray, Float64Array, RecordBatch};
use datafusion::arrow::datatypes::Float64Type;
use datafusion::prelude::{SessionConfig, SessionContext};

async fn ctx_with(partitions: usize, batch: usize) -> SessionContext {
    let config = SessionConfig::new()
        .with_target_partitions(partitions)
        .with_batch_size(batch)
        .with_information_schema(true);
    let ctx = SessionContext::new_with_config(config);
    posterity::register(&ctx);
    // 40 appointments over 4 breeds; no_show pattern chosen by hand.
    let mut rows = Vec::new();
    for i in 0..40 {
        let breed = ["beagle", "poodle", "boxer", "collie"][i % 4];
        let no_show = i32::from(i % 3 == 0 || (i % 4 == 1 && i % 5 == 0));
        let amount = 50.0 + (i as f64) * 1.5 + if i % 4 == 2 { 30.0 } else { 0.0 };
        let outcome = ["attended", "no_show", "late_cancel"][(i * 7) % 3];
        rows.push(format!(
            "('{breed}', {no_show}, {amount}, '{outcome}', {i}, {})",
            i % 5 + 1
        ));
    }
    ctx.sql(&format!(
        "CREATE TABLE appts (breed VARCHAR, no_show INT, amount DOUBLE, outcome VARCHAR, t INT, visits INT) AS VALUES {}",
        rows.join(", ")
    ))
    .await
    .unwrap();
    ctx
}

async fn ctx() -> SessionContext {
    ctx_with(4, 8192).await
}

async fn query(ctx: &SessionContext, sql: &str) -> Vec<RecordBatch> {
    ctx.sql(sql)
        .await
        .unwrap_or_else(|e| panic!("{sql}: {e}"))
        .collect()
        .await
        .unwrap_or_else(|e| panic!("{sql}: {e}"))
}

async fn error(ctx: &SessionContext, sql: &str) -> String {
    match ctx.sql(sql).await {
        Err(e) => e.to_string(),
        Ok(df) => match df.collect().await {
            Err(e) => e.to_string(),
            Ok(_) => panic!("expected an error from {sql}"),
        },
    }
}

/// All Float64 values of column `col`, in row order.
async fn floats(ctx: &SessionContext, sql: &str) -> Vec<Option<f64>> {
    let batches = query(ctx, sql).await;
    let mut out = Vec::new();
    for b in batches {
        let c = b.column(0).as_primitive::<Float64Type>();
        out.extend((0..c.len()).map(|i| c.is_valid(i).then(|| c.value(i))));
    }
    out
}

async fn one(ctx: &SessionContext, sql: &str) -> f64 {
    floats(ctx, sql).await[0].expect("a value")
}

fn close(got: f64, want: f64, tol: f64) {
    assert!(
        (got - want).abs() <= tol * want.abs().max(1.0),
        "got {got}, want {want}"
    );
}

// Jeffreys Beta(1/2, 1/2) + 2 successes, 1 failure = Beta(5/2, 3/2): mean 0.625,
// variance 0.046875 (exact arithmetic).
#[tokio::test]
async fn exact_beta_from_sql() {
    let c = ctx().await;
    let sql = "SELECT posterior_mean(p), posterior_var(p) FROM (SELECT beta_posterior(y) AS p FROM (VALUES (1), (1), (0)) t(y))";
    let b = query(&c, sql).await;
    close(
        b[0].column(0).as_primitive::<Float64Type>().value(0),
        0.625,
        1e-15,
    );
    close(
        b[0].column(1).as_primitive::<Float64Type>().value(0),
        0.046875,
        1e-15,
    );
    // Booleans and floats are accepted as outcomes.
    close(
        one(
            &c,
            "SELECT posterior_mean(beta_posterior(y)) FROM (VALUES (true), (true), (false)) t(y)",
        )
        .await,
        0.625,
        1e-15,
    );
    close(
        one(
            &c,
            "SELECT posterior_mean(beta_posterior(y)) FROM (VALUES (1.0), (1.0), (0.0)) t(y)",
        )
        .await,
        0.625,
        1e-15,
    );
}

#[tokio::test]
async fn fit_matches_count_and_sum() {
    let c = ctx().await;
    let sql = "SELECT posterior_mean(beta_posterior(no_show, beta_prior(1, 3))) - (SUM(no_show) + 1.0) / (COUNT(*) + 4.0) FROM appts GROUP BY breed";
    for d in floats(&c, sql).await {
        assert!(d.unwrap().abs() < 1e-15);
    }
    let sql =
        "SELECT posterior_data_weight(beta_posterior(no_show)) - COUNT(*) FROM appts GROUP BY breed";
    for d in floats(&c, sql).await {
        assert_eq!(d.unwrap(), 0.0);
    }
}

/// 0/1 outcomes give the same posterior in every layout the fit reads natively
/// (BIGINT, INT, BOOLEAN) or through a cast (SMALLINT, DOUBLE), and a value that is
/// not 0 or 1 is named in the error whatever its layout.
#[tokio::test]
async fn beta_outcomes_in_every_layout() {
    let c = ctx_with(2, 7).await;
    let layouts = [
        "CAST(no_show AS BIGINT)",
        "no_show",
        "no_show = 1",
        "CAST(no_show AS SMALLINT)",
        "CAST(no_show AS DOUBLE)",
    ];
    // One query per layout: the engine leaves casts out of column names, so two
    // layouts in one query would collide.
    let mut means = Vec::new();
    for y in layouts {
        let sql = format!(
            "SELECT posterior_mean(beta_posterior({y}, beta_prior(1, 3))) FROM appts GROUP BY breed ORDER BY breed"
        );
        means.push(floats(&c, &sql).await);
    }
    assert_eq!(means[0].len(), 4);
    for m in &means {
        assert_eq!(m, &means[4], "{layouts:?}");
    }
    for y in [
        "CAST(no_show + t AS BIGINT)",
        "no_show + t",
        "CAST(no_show + t AS DOUBLE)",
    ] {
        let e = error(
            &c,
            &format!("SELECT beta_posterior({y}) FROM appts GROUP BY breed"),
        )
        .await;
        assert!(e.contains("beta_posterior") && e.contains("outcome"), "{e}");
    }
}

/// Class counts equal the engine's own COUNT per class, whatever the text's
/// layout (inline and long views, plain and large strings, dictionaries), with
/// NULL classes skipped, filtered-out unknown classes ignored, a weight column,
/// and a class list long enough to be looked up by hash.
#[tokio::test]
async fn dirichlet_counts_match_count_per_class() {
    let c = ctx_with(2, 7).await;
    // 24 classes: short ones, long ones that share their first 12 bytes, and one
    // exactly 12 bytes long (the longest text a view holds inline).
    let mut classes: Vec<String> = (0..12).map(|i| format!("c{i}")).collect();
    classes.extend((0..11).map(|i| format!("long_class_name_{i}")));
    classes.push("twelve_bytes".into());
    let rows: Vec<String> = (0..300)
        .map(|i| {
            let class = match i % 29 {
                0 => "NULL".to_string(),
                1 => "'not_a_class'".to_string(),
                r => format!("'{}'", classes[(r * 7 + i / 29) % classes.len()]),
            };
            format!("({}, {class}, {})", i % 5, 0.5 + (i % 3) as f64)
        })
        .collect();
    query(
        &c,
        &format!(
            "CREATE TABLE cls (g INT, class VARCHAR, w DOUBLE) AS VALUES {}",
            rows.join(", ")
        ),
    )
    .await;
    let all: Vec<String> = classes.iter().map(|c| format!("'{c}'")).collect();
    let prior = format!("dirichlet_prior([{}], 1)", all.join(", "));
    let few = format!("dirichlet_prior([{}], 1)", all[..3].join(", "));
    let k = classes.len() as f64;
    for layout in ["Utf8", "LargeUtf8", "Utf8View", "Dictionary(Int32, Utf8)"] {
        let text = format!("arrow_cast(class, '{layout}')");
        for (i, name) in classes.iter().enumerate() {
            // Every class of a long list, then the first three of a short list.
            let (p, n) = match i < 3 {
                true => (&few, "3.0".to_string()),
                false => (&prior, format!("{k:.1}")),
            };
            let keep = match i < 3 {
                true => format!("class IN ({})", all[..3].join(", ")),
                false => "class <> 'not_a_class'".to_string(),
            };
            let sql = format!(
                "SELECT posterior_mean(dirichlet_posterior({text}, {p}) FILTER (WHERE {keep}), '{name}') \
                 - (1 + COUNT(*) FILTER (WHERE class = '{name}')) / ({n} + COUNT(class) FILTER (WHERE {keep})), \
                 posterior_mean(dirichlet_posterior({text}, {p}, w) FILTER (WHERE {keep}), '{name}') \
                 - (1 + COALESCE(SUM(w) FILTER (WHERE class = '{name}'), 0)) / ({n} + SUM(w) FILTER (WHERE {keep})) \
                 FROM cls GROUP BY g"
            );
            for b in query(&c, &sql).await {
                for col in b.columns() {
                    for d in col.as_primitive::<Float64Type>().iter() {
                        assert!(d.unwrap().abs() < 1e-15, "{sql}: {d:?}");
                    }
                }
            }
        }
        // Unfiltered, the unknown class is an error that names it.
        let e = error(
            &c,
            &format!("SELECT dirichlet_posterior({text}, {prior}) FROM cls GROUP BY g"),
        )
        .await;
        assert!(
            e.contains("dirichlet_posterior") && e.contains("'not_a_class'"),
            "{e}"
        );
    }
}

/// Readers over a join are computed on the join's input (once per level) by
/// `posterity::read_before_join`; the answers, names and NULLs of padded rows
/// must equal the engine's own plan without the rule.
#[tokio::test]
async fn readers_before_a_join_give_the_same_answers() {
    let with = ctx_with(2, 7).await;
    let without = ctx_with(2, 7).await;
    assert!(without.remove_optimizer_rule(posterity::read_before_join::RULE_NAME));
    let prior = "dirichlet_prior(['attended', 'no_show', 'late_cancel'], 0.5)";
    for c in [&with, &without] {
        // collie has no encoding: its rows are padded with NULL by outer joins.
        query(c, &format!(
            "CREATE TABLE enc AS SELECT breed, beta_posterior(no_show) AS b, nig_posterior(amount) AS n, \
             dirichlet_posterior(outcome, {prior}) AS d FROM appts WHERE breed <> 'collie' GROUP BY breed"
        )).await;
    }
    let queries = [
        // A projection: readers of the encoding side; readers of a computed
        // posterior or with a parameter from the row side stay above the join
        // (the COALESCE reads the prior, not NULL, on the padded collie rows).
        "SELECT a.t, a.breed, posterior_mean(e.b), posterior_var(e.n) AS v, posterior_quantile(e.b, 0.05), \
         posterior_interval(e.n, 0.9), posterior_mean(e.d, 'no_show'), posterior_data_weight(e.b), \
         posterior_prob_above(e.n, 60), posterior_mean(posterior_merge(e.b, beta_prior(0.5, 0.5))), \
         posterior_mean(COALESCE(e.b, beta_prior(1, 3))), \
         posterior_quantile(e.b, (a.t + 1) / 100.0), COALESCE(posterior_mean(e.b), -1) + a.t \
         FROM appts a LEFT JOIN enc e ON a.breed = e.breed ORDER BY a.t",
        "SELECT a.t, posterior_sd(e.n) FROM enc e RIGHT JOIN appts a ON a.breed = e.breed ORDER BY a.t",
        "SELECT a.t, posterior_mean(e.b) * 2 FROM appts a JOIN enc e USING (breed) ORDER BY a.t",
        "SELECT e.breed, a.t, posterior_mean(e.b) FROM (SELECT * FROM appts WHERE t < 10) a FULL JOIN enc e \
         USING (breed) ORDER BY e.breed, a.t",
        // Aggregates over the join: names kept for the outer query.
        "SELECT a.breed, SUM(posterior_mean(e.b)) AS s, MAX(posterior_quantile(e.n, 0.9)) \
         FROM appts a LEFT JOIN enc e USING (breed) GROUP BY a.breed ORDER BY a.breed",
        "SELECT SUM(posterior_mean(e.b)) FROM appts a LEFT JOIN enc e USING (breed)",
        // Two encodings of the same level, one from each side.
        "SELECT posterior_mean(x.b) - posterior_mean(y.b) AS d FROM enc x JOIN enc y ON x.breed = y.breed \
         ORDER BY d",
    ];
    for sql in queries {
        let a = query(&with, sql).await;
        let b = query(&without, sql).await;
        let show = |batches: &[RecordBatch]| {
            datafusion::arrow::util::pretty::pretty_format_batches(batches)
                .unwrap()
                .to_string()
        };
        assert_eq!(show(&a), show(&b), "{sql}");
        assert_eq!(a[0].schema(), b[0].schema(), "{sql}");
    }
    // The readers run below the join: in a projection (the first query) and in an
    // aggregate (the sixth, where the engine puts a projection between the two).
    for (sql, reader) in [
        (queries[0], "posterior_quantile(e.b, Float64(0.05))"),
        (queries[5], "posterior_mean(e.b)"),
    ] {
        let plan = with.sql(sql).await.unwrap().into_optimized_plan().unwrap();
        let plan = plan.display_indent().to_string();
        let lines: Vec<&str> = plan.lines().collect();
        let join = lines.iter().position(|l| l.contains("Join")).unwrap();
        let last = lines.iter().rposition(|l| l.contains(reader)).unwrap();
        assert!(last > join, "{reader} should run below the join:\n{plan}");
    }
}

#[tokio::test]
async fn unseen_levels_fall_back_to_the_prior() {
    let c = ctx().await;
    query(&c, "CREATE TABLE enc AS SELECT breed, beta_posterior(no_show, beta_prior(1, 3)) AS p FROM appts GROUP BY breed").await;
    let sql = "SELECT posterior_mean(COALESCE(enc.p, beta_prior(1, 3))) FROM (VALUES ('husky')) s(breed) LEFT JOIN enc USING (breed)";
    close(one(&c, sql).await, 0.25, 1e-15);
}

// A prior is its own posterior without evidence: taken as a new prior it keeps its
// parameters, also far from zero (a prior mean of 1e300 once gave beta0 = NaN).
#[tokio::test]
async fn a_prior_taken_as_a_prior_keeps_its_parameters() {
    let c = ctx().await;
    let sql = "SELECT posterior_mean(posterior_with_prior(nig_prior(0, 1, 1, 1), nig_prior(1e300, 1e-15, 0.01, 1e-6)))";
    assert_eq!(one(&c, sql).await, 1e300);
    // The mean's variance under NIG(mu0, kappa0, alpha0, beta0) is beta0 / (kappa0 (alpha0 - 1))
    // (K. P. Murphy, "Conjugate Bayesian analysis of the Gaussian distribution", 2007; from memory).
    let sql = "SELECT posterior_var(posterior_with_prior(nig_prior(0, 1, 3, 1), nig_prior(-1e300, 2, 3, 4)))";
    close(one(&c, sql).await, 4.0 / (2.0 * 2.0), 1e-15);
}

async fn summary(ctx: &SessionContext) -> Vec<Option<f64>> {
    let sql = "SELECT posterior_mean(b) + posterior_quantile(n, 0.9) + posterior_mean(g) + posterior_mean(d, 'no_show') + posterior_sd(n) FROM (
        SELECT breed, beta_posterior(no_show) AS b, nig_posterior(amount, nig_prior(60, 1, 2, 100)) AS n,
               gamma_posterior(visits, 1.0) AS g,
               dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show', 'late_cancel'], 1)) AS d
        FROM appts GROUP BY breed) ORDER BY breed";
    floats(ctx, sql).await
}

#[tokio::test]
async fn partition_and_batch_invariance() {
    let reference = summary(&ctx_with(1, 8192).await).await;
    for (p, b) in [(2, 7), (8, 1), (8, 8192), (3, 7)] {
        let got = summary(&ctx_with(p, b).await).await;
        for (x, y) in got.iter().zip(&reference) {
            close(x.unwrap(), y.unwrap(), 1e-12);
        }
    }
}

// As-of encodings: each row sees only earlier rows of its level.
#[tokio::test]
async fn window_as_of_and_sliding() {
    let c = ctx().await;
    let sql = "SELECT posterior_data_weight(beta_posterior(no_show) OVER (PARTITION BY breed ORDER BY t ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)) FROM appts WHERE breed = 'beagle' ORDER BY t";
    let got = floats(&c, sql).await;
    let want: Vec<Option<f64>> = (0..10).map(|i| Some(i as f64)).collect();
    assert_eq!(got, want);
    // Same as an explicit self-join aggregate.
    let window = "SELECT posterior_mean(beta_posterior(no_show) OVER (PARTITION BY breed ORDER BY t ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)) FROM appts ORDER BY t";
    let joined = "SELECT posterior_mean(beta_posterior(b.no_show)) FROM appts a LEFT JOIN appts b ON a.breed = b.breed AND b.t < a.t GROUP BY a.t ORDER BY a.t";
    for (x, y) in floats(&c, window)
        .await
        .iter()
        .zip(floats(&c, joined).await)
    {
        close(x.unwrap(), y.unwrap(), 1e-12);
    }
    // Sliding RANGE frame (retraction) against a direct computation.
    let sliding = "SELECT posterior_mean(nig_posterior(amount, nig_prior(0, 1, 2, 1)) OVER (ORDER BY t RANGE BETWEEN 5 PRECEDING AND 1 PRECEDING)) FROM appts ORDER BY t";
    let direct = "SELECT posterior_mean(nig_posterior(b.amount, nig_prior(0, 1, 2, 1))) FROM appts a LEFT JOIN appts b ON b.t BETWEEN a.t - 5 AND a.t - 1 GROUP BY a.t ORDER BY a.t";
    for (x, y) in floats(&c, sliding)
        .await
        .iter()
        .zip(floats(&c, direct).await)
    {
        close(x.unwrap(), y.unwrap(), 1e-9);
    }
}

#[tokio::test]
async fn pooled_days_equal_a_full_fit() {
    let c = ctx().await;
    let pooled = "SELECT posterior_mean(posterior_pool(p)) FROM (SELECT breed, t % 3 AS day, nig_posterior(amount) AS p FROM appts GROUP BY breed, t % 3) GROUP BY breed ORDER BY breed";
    let full =
        "SELECT posterior_mean(nig_posterior(amount)) FROM appts GROUP BY breed ORDER BY breed";
    for (x, y) in floats(&c, pooled).await.iter().zip(floats(&c, full).await) {
        close(x.unwrap(), y.unwrap(), 1e-12);
    }
}

// A pool's value does not depend on the order its inputs arrive in (compensated
// sums, like the fit aggregates; plain float sums differ in the last bits): the
// same 40 one-row posteriors with uneven weights pooled in opposite window
// orders, and grouped over 1 and 4 partitions in batches of 3, give the same bits
// in every field of every family.
#[tokio::test]
async fn pool_gives_the_same_bits_in_any_order() {
    let weight = "(0.37 + 0.113 * t)";
    let families = [
        (
            format!("beta_posterior(no_show, beta_prior(0.5, 0.5), {weight})"),
            vec!["['successes']", "['trials']"],
        ),
        (
            format!("gamma_posterior(visits * {weight}, {weight} * 0.7)"),
            vec!["['events']", "['exposure']"],
        ),
        (
            format!("nig_posterior(amount * 1.0001, nig_prior(61.3, 0.01, 2, 3), {weight})"),
            vec!["['n']", "['mean']", "['m2']"],
        ),
        (
            format!("dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show', 'late_cancel'], 0.5), {weight})"),
            vec!["['counts'][1]", "['counts'][2]", "['counts'][3]"],
        ),
    ];
    let (one_partition, four) = (ctx_with(1, 3).await, ctx_with(4, 3).await);
    for (fit, fields) in families {
        let rows = format!("SELECT t, {fit} AS p FROM appts GROUP BY t");
        for field in fields {
            let windowed = |order: &str| {
                format!(
                    "SELECT p{field} FROM (SELECT posterior_pool(p) OVER (ORDER BY t {order} ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW) AS p, \
                     row_number() OVER (ORDER BY t {order}) AS r FROM ({rows})) WHERE r = 40"
                )
            };
            let grouped = format!("SELECT posterior_pool(p){field} FROM ({rows})");
            let up = one(&one_partition, &windowed("ASC")).await;
            for (ctx, sql) in [
                (&one_partition, windowed("DESC")),
                (&one_partition, grouped.clone()),
                (&four, grouped.clone()),
            ] {
                let got = one(ctx, &sql).await;
                assert_eq!(
                    got.to_bits(),
                    up.to_bits(),
                    "{fit} {field}: {got} vs {up} ({sql})"
                );
            }
        }
    }
}

// posterior_pool over sliding window frames (it retracts what leaves a frame):
// days' posteriors pooled over the two days before each day equal a fit of those
// days' rows, for every family; a frame with no rows (days 4-6 are left out, so
// day 7 reads nothing after day 6 read day 3) is NULL, as the docs say.
#[tokio::test]
async fn pool_slides_over_window_frames() {
    let c = ctx().await;
    let fits = [
        ("beta_posterior(no_show, beta_prior(1, 2))", ""),
        ("gamma_posterior(visits, 1.5, gamma_prior(2, 1))", ""),
        ("nig_posterior(amount, nig_prior(70, 0.5, 2, 40))", ""),
        (
            "dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show', 'late_cancel'], 0.5))",
            ", 'no_show'",
        ),
    ];
    let days = "(SELECT *, t / 4 AS d FROM appts WHERE t / 4 NOT IN (4, 5, 6))";
    for (fit, class) in fits {
        let pooled = format!(
            "SELECT posterior_mean(posterior_pool(p) OVER (ORDER BY d RANGE BETWEEN 2 PRECEDING AND 1 PRECEDING){class}) \
             FROM (SELECT d, {fit} AS p FROM {days} GROUP BY d) ORDER BY d"
        );
        let direct = format!(
            "SELECT posterior_mean({}{class}) FROM (SELECT DISTINCT d FROM {days}) k \
             LEFT JOIN {days} a ON a.d BETWEEN k.d - 2 AND k.d - 1 GROUP BY k.d ORDER BY k.d",
            fit.replace("(no_show", "(a.no_show")
                .replace("(visits", "(a.visits")
                .replace("(amount", "(a.amount")
                .replace("(outcome", "(a.outcome")
        );
        let (got, want) = (floats(&c, &pooled).await, floats(&c, &direct).await);
        assert_eq!(got.len(), 7, "{fit}");
        for (i, (g, w)) in got.iter().zip(&want).enumerate() {
            // Days 0 and 7 read no rows: NULL from the pool (the direct fit of no
            // rows is the prior).
            if i == 0 || i == 4 {
                assert_eq!(*g, None, "{fit}: day {i}");
                continue;
            }
            close(g.unwrap(), w.unwrap(), 1e-12);
        }
    }
}

// Posteriors written by other tools may carry integer or single-precision fields:
// they read, pool and slide as the same posterior in Float64 (the decoder casts only
// such columns). Expected means by the conjugate updates, (a0 + s) / (a0 + b0 + n)
// and (a0_c + n_c) / sum(a0 + n) (Gelman et al., Bayesian Data Analysis, 3rd ed.,
// sections 2.4 and 3.4; from memory).
#[tokio::test]
async fn posteriors_with_integer_fields_read_as_floats() {
    let c = ctx().await;
    let beta = one(
        &c,
        "SELECT posterior_mean(named_struct('a0', 1, 'b0', 2, 'successes', 3, 'trials', CAST(10 AS REAL)))",
    )
    .await;
    close(beta, 4.0 / 13.0, 1e-15);
    let dirichlet = one(
        &c,
        "SELECT posterior_mean(named_struct('classes', ['a', 'b'], 'a0', [1, 1], 'counts', [2, 3]), 'a')",
    )
    .await;
    close(dirichlet, 3.0 / 7.0, 1e-15);
    // A running pool over integer-field posteriors: day d reads days before it.
    let running = floats(
        &c,
        "SELECT posterior_mean(posterior_pool(p) OVER (ORDER BY d ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)) \
         FROM (VALUES (1, named_struct('a0', 1, 'b0', 1, 'successes', 2, 'trials', 3)), \
                      (2, named_struct('a0', 1, 'b0', 1, 'successes', 0, 'trials', 4)), \
                      (3, named_struct('a0', 1, 'b0', 1, 'successes', 5, 'trials', 5))) t(d, p) ORDER BY d",
    )
    .await;
    assert_eq!(running[0], None, "day 1 reads no earlier day");
    close(running[1].unwrap(), 3.0 / 5.0, 1e-15);
    close(running[2].unwrap(), 3.0 / 9.0, 1e-15);
}

// Out-of-fold = total minus the fold's own evidence = a fit on the other folds.
#[tokio::test]
async fn out_of_fold_by_subtraction() {
    let c = ctx().await;
    let oof = "WITH f AS (SELECT *, fold_of(t, 4) AS fold FROM appts),
        total AS (SELECT breed, beta_posterior(no_show) AS p FROM f GROUP BY breed),
        per_fold AS (SELECT breed, fold, beta_posterior(no_show) AS p FROM f GROUP BY breed, fold)
        SELECT posterior_mean(posterior_subtract(total.p, per_fold.p)) FROM total JOIN per_fold USING (breed) ORDER BY breed, fold";
    let direct = "WITH f AS (SELECT *, fold_of(t, 4) AS fold FROM appts),
        keys AS (SELECT DISTINCT breed, fold FROM f)
        SELECT posterior_mean(beta_posterior(f.no_show)) FROM keys k LEFT JOIN f ON f.breed = k.breed AND f.fold <> k.fold GROUP BY k.breed, k.fold ORDER BY k.breed, k.fold";
    let (a, b) = (floats(&c, oof).await, floats(&c, direct).await);
    assert_eq!(a.len(), b.len());
    for (x, y) in a.iter().zip(b) {
        close(x.unwrap(), y.unwrap(), 1e-12);
    }
    // Leave-one-out equals the fit without that row.
    let loo = "SELECT posterior_mean(posterior_without(e.p, a.no_show)) FROM appts a JOIN (SELECT breed, beta_posterior(no_show) AS p FROM appts GROUP BY breed) e USING (breed) ORDER BY a.t";
    let direct = "SELECT posterior_mean(beta_posterior(b.no_show)) FROM appts a LEFT JOIN appts b ON a.breed = b.breed AND b.t <> a.t GROUP BY a.t ORDER BY a.t";
    for (x, y) in floats(&c, loo).await.iter().zip(floats(&c, direct).await) {
        close(x.unwrap(), y.unwrap(), 1e-12);
    }
}

#[tokio::test]
async fn parquet_round_trip() {
    let c = ctx().await;
    let dir = scratch!("round-trip");
    let path = dir.join("enc.parquet");
    std::fs::create_dir_all(&dir).unwrap();
    query(&c, &format!("COPY (SELECT breed, beta_posterior(no_show) AS b, nig_posterior(amount) AS n, dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show', 'late_cancel'], 0.5)) AS d FROM appts GROUP BY breed) TO '{}' STORED AS PARQUET", path.display())).await;
    query(
        &c,
        &format!(
            "CREATE EXTERNAL TABLE back STORED AS PARQUET LOCATION '{}'",
            path.display()
        ),
    )
    .await;
    let a = floats(&c, "SELECT posterior_mean(b) + posterior_mean(n) + posterior_mean(d, 'late_cancel') FROM back ORDER BY breed").await;
    let b = floats(&c, "SELECT posterior_mean(beta_posterior(no_show)) + posterior_mean(nig_posterior(amount)) + posterior_mean(dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show', 'late_cancel'], 0.5)), 'late_cancel') FROM appts GROUP BY breed ORDER BY breed").await;
    assert_eq!(a, b);
    std::fs::remove_dir_all(&dir).ok();
}

#[tokio::test]
async fn clear_errors() {
    let c = ctx().await;
    let e = error(&c, "SELECT beta_posterior(y) FROM (VALUES (2)) t(y)").await;
    assert!(
        e.contains("beta_posterior") && e.contains("outcome = 2"),
        "{e}"
    );
    let e = error(&c, "SELECT posterior_mean(named_struct('x', 1.0))").await;
    assert!(
        e.contains("posterior_mean") && e.contains("expected a posterior struct"),
        "{e}"
    );
    let e = error(&c, "SELECT posterior_mean(0.5)").await;
    assert!(e.contains("posterior_mean"), "{e}");
    let e = error(&c, "SELECT posterior_quantile(beta_prior(1, 1), 1.5)").await;
    assert!(
        e.contains("q = 1.5") && e.contains("strictly between 0 and 1"),
        "{e}"
    );
    let e = error(&c, "SELECT beta_prior(0, 1)").await;
    assert!(e.contains("beta_prior") && e.contains("a = 0"), "{e}");
    let e = error(
        &c,
        "SELECT posterior_merge(beta_prior(1, 1), beta_prior(1, 2))",
    )
    .await;
    assert!(
        e.contains("beta_prior(1, 1)") && e.contains("beta_prior(1, 2)"),
        "{e}"
    );
    let e = error(&c, "SELECT fold_of('x', 0)").await;
    assert!(e.contains("fold_of") && e.contains("k = 0"), "{e}");
    let e = error(
        &c,
        "SELECT dirichlet_posterior(outcome, dirichlet_prior(['attended'], 1)) FROM appts",
    )
    .await;
    assert!(e.contains("no_show") || e.contains("late_cancel"), "{e}");
    let e = error(
        &c,
        "SELECT beta_posterior(no_show, p) FROM appts, (SELECT beta_prior(1, 1) AS p)",
    )
    .await;
    assert!(e.contains("must be a constant"), "{e}");
}

#[tokio::test]
async fn nulls_are_ignored_or_propagated() {
    let c = ctx().await;
    close(
        one(
            &c,
            "SELECT posterior_data_weight(beta_posterior(y)) FROM (VALUES (1), (NULL), (0)) t(y)",
        )
        .await,
        2.0,
        0.0,
    );
    assert_eq!(
        floats(
            &c,
            "SELECT posterior_mean(CASE WHEN false THEN beta_prior(1, 1) END)"
        )
        .await,
        vec![None]
    );
    // An empty input still yields the prior.
    close(one(&c, "SELECT posterior_mean(beta_posterior(no_show, beta_prior(1, 3))) FROM appts WHERE t < 0").await, 0.25, 1e-15);
}

#[tokio::test]
async fn decay_and_folds() {
    let c = ctx().await;
    close(one(&c, "SELECT decay_weight(90, 90)").await, 0.5, 0.0);
    close(one(&c, "SELECT decay_weight(0, 7)").await, 1.0, 0.0);
    let b = query(
        &c,
        "SELECT fold_of('123', 5) = fold_of(123, 5), fold_of('beagle', 5, 1) BETWEEN 0 AND 4",
    )
    .await;
    assert!(b[0].column(0).as_boolean().value(0));
    assert!(b[0].column(1).as_boolean().value(0));
    // Pinned values: folds must not move between versions, or training encodings
    // written before an upgrade would no longer be reproducible.
    let pinned = query(
        &c,
        "SELECT fold_of('beagle', 5), fold_of('beagle', 5, 1), fold_of(123, 5), fold_of(0, 10, 7), fold_of('naïve café', 3)",
    )
    .await;
    let got: Vec<i64> = (0..5)
        .map(|i| {
            let col = datafusion::arrow::compute::cast(
                pinned[0].column(i),
                &datafusion::arrow::datatypes::DataType::Int64,
            )
            .unwrap();
            col.as_primitive::<datafusion::arrow::datatypes::Int64Type>()
                .value(0)
        })
        .collect();
    assert_eq!(got, [3, 0, 0, 9, 2]);
}

// A bundle entry of no known shape is an error, not a Beta posterior.
#[test]
fn unknown_bundle_shapes_are_refused() {
    let e = posterity::bundle::posterior_from_json(&serde_json::json!({"alpha": 1.0, "beta": 2.0}))
        .unwrap_err();
    assert!(
        e.to_string()
            .contains("{alpha, beta} is not a posterior of any family"),
        "{e}"
    );
}

#[tokio::test]
async fn an_empty_prior_fit_says_so() {
    let c = ctx().await;
    let e = error(&c, "SELECT fit_prior(p) FROM (SELECT beta_posterior(no_show) AS p FROM appts WHERE false GROUP BY breed)").await;
    assert!(
        e.contains("fit_prior") && e.contains("no level has any evidence"),
        "{e}"
    );
}

#[tokio::test]
async fn functions_are_documented_in_information_schema() {
    let c = ctx().await;
    let b = query(&c, "SELECT DISTINCT routine_name FROM information_schema.routines WHERE (routine_name LIKE 'posterior_%' OR routine_name LIKE '%_prior' OR routine_name LIKE '%_posterior%') AND length(description) > 20 AND syntax_example LIKE '%(%'").await;
    let n: usize = b.iter().map(|b| b.num_rows()).sum();
    assert!(n >= 20, "{n} functions listed");
    // Both ways: every registered function carries the documentation of its name,
    // and every documented name is a registered function.
    let mut registered: Vec<String> = posterity::scalar::all()
        .iter()
        .map(|f| {
            assert_eq!(
                f.documentation(),
                posterity::docs::get(f.name()),
                "{}",
                f.name()
            );
            assert!(f.documentation().is_some(), "{} is undocumented", f.name());
            f.name().to_string()
        })
        .chain(posterity::aggregates().iter().map(|f| {
            assert!(f.documentation().is_some(), "{} is undocumented", f.name());
            f.name().to_string()
        }))
        .chain(posterity::window_functions().iter().map(|f| {
            assert!(f.documentation().is_some(), "{} is undocumented", f.name());
            f.name().to_string()
        }))
        .collect();
    registered.sort();
    let mut documented: Vec<String> = posterity::docs::FUNCTIONS
        .iter()
        .map(|f| f.name.to_string())
        .collect();
    documented.sort();
    assert_eq!(registered, documented);
    let _ = Float64Array::from(vec![1.0]);
}

// posterior_evidence, the earlier name of posterior_data_weight, still works.
#[tokio::test]
async fn earlier_names_still_work() {
    let c = ctx().await;
    let v = floats(&c, "SELECT posterior_evidence(beta_posterior(no_show)) - posterior_data_weight(beta_posterior(no_show)) FROM appts").await;
    assert_eq!(v, [Some(0.0)]);
}

// The join rule builds on the aggregate (the encodings) instead of the rows, and
// leaves results unchanged.
#[tokio::test]
async fn join_rule_builds_on_the_aggregate() {
    use datafusion::execution::session_state::SessionStateBuilder;
    let with_rule = SessionContext::new_with_state(
        posterity::optimizer::with_build_on_aggregate(
            SessionStateBuilder::new().with_default_features(),
        )
        .build(),
    );
    posterity::register(&with_rule);
    let plain = ctx().await;
    let rows: Vec<String> = (0..200)
        .map(|i| format!("('k{}', {})", i % 13, i % 3 % 2))
        .collect();
    for c in [&with_rule, &plain] {
        query(
            c,
            &format!(
                "CREATE TABLE r (k VARCHAR, y INT) AS VALUES {}",
                rows.join(", ")
            ),
        )
        .await;
    }
    let sql = "SELECT posterior_mean(e.p) FROM r LEFT JOIN (SELECT k, beta_posterior(y) AS p FROM r GROUP BY k) e USING (k) ORDER BY r.k, 1";
    let plan = query(&with_rule, &format!("EXPLAIN {sql}")).await;
    let text = datafusion::arrow::util::pretty::pretty_format_batches(&plan)
        .unwrap()
        .to_string();
    assert!(text.contains("join_type=Right"), "{text}");
    let a = floats(&with_rule, sql).await;
    let b = floats(&plain, sql).await;
    assert_eq!(a.len(), 200);
    assert_eq!(a, b);
}

/// Every posterior in column 0 of `sql`'s result (NULLs as `None`).
async fn posteriors(
    ctx: &SessionContext,
    sql: &str,
) -> Vec<Option<posterity::layout::AnyPosterior>> {
    let mut out = Vec::new();
    for b in query(ctx, sql).await {
        let column = posterity::layout::PosteriorColumn::new("test", b.column(0)).unwrap();
        for i in 0..b.num_rows() {
            out.push(column.get(i).unwrap());
        }
    }
    out
}

// Every fit aggregate, every way a frame or group can hold no usable row: the value
// is the prior the query passed (not the default prior, not NULL). Before the
// planning rule bound fits to their priors, empty frames and decorrelated empty
// groups gave Beta(0.5, 0.5) / Gamma(0.5, 1) / the default NIG, and the Dirichlet
// window failed on a NULL in a non-nullable column.
#[tokio::test]
async fn empty_frames_and_groups_keep_the_querys_prior() {
    let ctx = ctx().await;
    // (function call with `{v}` for the value column, its prior, the value column).
    let fits = [
        (
            "beta_posterior({v}, {prior})",
            "beta_prior(2, 38)",
            "no_show",
        ),
        (
            "beta_posterior({v}, {prior}, visits)",
            "beta_prior(2, 38)",
            "no_show",
        ),
        (
            "beta_posterior_counts({v}, visits, {prior})",
            "beta_prior(3, 7)",
            "no_show",
        ),
        (
            "gamma_posterior({v}, 2.5, {prior})",
            "gamma_prior(4, 2)",
            "visits",
        ),
        (
            "nig_posterior({v}, {prior})",
            "nig_prior(60, 2, 3, 40)",
            "amount",
        ),
        (
            "nig_posterior({v}, {prior}, visits)",
            "nig_prior(60, 2, 3, 40)",
            "amount",
        ),
        (
            "dirichlet_posterior({v}, {prior})",
            "dirichlet_prior(['attended', 'no_show', 'late_cancel'], 0.7)",
            "outcome",
        ),
    ];
    // Each context selects the posterior as column 0 for rows whose frame or group
    // is empty; `{fit}` is the call.
    let contexts = [
        // Leading ROWS frame: each breed's first row.
        ("rows_leading", "SELECT p FROM (SELECT t, breed, {fit} OVER (PARTITION BY breed ORDER BY t ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING) AS p FROM appts) WHERE t < 4"),
        // Sliding ROWS frame, empty at the start of each partition.
        ("rows_sliding", "SELECT p FROM (SELECT t, breed, {fit} OVER (PARTITION BY breed ORDER BY t ROWS BETWEEN 3 PRECEDING AND 1 PRECEDING) AS p FROM appts) WHERE t < 4"),
        // Leading RANGE frame ending before the row's own time.
        ("range_leading", "SELECT p FROM (SELECT t, breed, {fit} OVER (PARTITION BY breed ORDER BY t RANGE BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING) AS p FROM appts) WHERE t < 4"),
        // Sliding RANGE frame that empties after holding rows: a breed's rows are 4
        // apart in t, and the order key jumps by 100 at t = 20, so the frame holds
        // the previous row except at each breed's first row and right after the jump.
        ("range_sliding", "SELECT p FROM (SELECT t, breed, {fit} OVER (PARTITION BY breed ORDER BY t + 100 * (t / 20) RANGE BETWEEN 4 PRECEDING AND 1 PRECEDING) AS p FROM appts) WHERE t < 4 OR t BETWEEN 20 AND 23"),
        // A correlated scalar subquery over an empty group (decorrelated by the engine).
        ("scalar_subquery", "SELECT (SELECT {fit} FROM appts a WHERE a.breed = b.name) FROM (VALUES ('dachshund'), ('whippet')) b(name)"),
        // An aggregate over no rows at all.
        ("no_rows", "SELECT {fit} FROM appts WHERE false"),
        // A group whose rows are all filtered out.
        ("filtered_group", "SELECT {fit} FILTER (WHERE t < 0) FROM appts GROUP BY breed"),
        // A group whose values are all NULL.
        ("null_group", "SELECT {fit_null} FROM appts GROUP BY breed"),
    ];
    for (call, prior, value) in fits {
        let want = posteriors(&ctx, &format!("SELECT {prior}")).await[0].clone();
        assert!(want.is_some());
        for (name, template) in contexts {
            let fit = call.replace("{prior}", prior);
            let sql = template
                .replace(
                    "{fit_null}",
                    &fit.replace("{v}", &format!("CASE WHEN t < 0 THEN {value} END")),
                )
                .replace("{fit}", &fit.replace("{v}", value));
            let got = posteriors(&ctx, &sql).await;
            assert!(!got.is_empty(), "{name}: {sql} selected no rows");
            for p in got {
                assert_eq!(p, want, "{name}: {sql}");
            }
        }
    }
}

// A Student-t with nu <= 2 degrees of freedom has infinite variance (BDA3, Appendix
// A, table of distributions): the readers say NULL, never inf, and are finite at
// nu = 3 (variance scale^2 * nu / (nu - 2) = 3 * beta/(alpha * kappa) here).
#[tokio::test]
async fn infinite_variance_reads_as_null() {
    let ctx = ctx().await;
    let v = floats(
        &ctx,
        "SELECT posterior_var(p) FROM (VALUES (nig_prior(0, 1, 1, 1)), (nig_prior(0, 1, 0.4, 1)), (nig_prior(0, 1, 1.5, 1))) t(p)",
    )
    .await;
    assert_eq!(v[0], None);
    assert_eq!(v[1], None);
    // alpha = 1.5: nu = 3, scale^2 = beta / (alpha kappa) = 1 / 1.5, variance = 3 * (1/1.5) = 2.
    close(v[2].unwrap(), 2.0, 1e-15);
    let sd = floats(&ctx, "SELECT posterior_sd(nig_prior(5, 2, 0.9, 3))").await;
    assert_eq!(sd[0], None);
}

// Readers at the edge of their domain, for every family, against closed forms
// (BDA3, Appendix A: Beta mean a/(a+b), variance ab/((a+b)^2(a+b+1)); Gamma mean
// k/r, variance k/r^2; the NIG marginal of the mean is a Student-t with 2 alpha
// degrees of freedom, location mu, scale^2 = beta/(alpha kappa); Dirichlet
// marginals are Beta(a_i, sum - a_i)): zero evidence (the prior itself), one row,
// and extreme shapes.
#[tokio::test]
async fn readers_at_the_edges_of_their_domains() {
    let c = ctx().await;
    let cases: &[(&str, f64, f64)] = &[
        // (posterior expression, mean, variance)
        (
            "beta_prior(2, 38)",
            2.0 / 40.0,
            2.0 * 38.0 / (40.0f64.powi(2) * 41.0),
        ),
        (
            "beta_posterior(y, beta_prior(2, 38)) FROM (VALUES (1)) t(y)",
            3.0 / 41.0,
            3.0 * 38.0 / (41.0f64.powi(2) * 42.0),
        ),
        ("beta_prior(1e-3, 1e-3)", 0.5, 0.25 / (2e-3 + 1.0)),
        (
            "beta_prior(1e7, 3e7)",
            0.25,
            1e7 * 3e7 / (4e7f64.powi(2) * (4e7 + 1.0)),
        ),
        ("gamma_prior(0.5, 1)", 0.5, 0.5),
        (
            "gamma_posterior(e, 2.0, gamma_prior(0.5, 1)) FROM (VALUES (3)) t(e)",
            3.5 / 3.0,
            3.5 / 9.0,
        ),
        (
            "nig_prior(10, 2, 3, 4)",
            10.0,
            (4.0 / (3.0 * 2.0)) * 6.0 / 4.0,
        ),
        (
            "dirichlet_prior(['a', 'b', 'c'], [1, 2, 5])",
            1.0 / 8.0,
            1.0 * 7.0 / (64.0 * 9.0),
        ),
    ];
    for (p, mean, var) in cases {
        let (expr, from) = match p.split_once(" FROM ") {
            Some((expr, rest)) => (expr, format!(" FROM {rest}")),
            None => (*p, String::new()),
        };
        let class = if expr.contains("dirichlet") {
            ", 'a'"
        } else {
            ""
        };
        let sql = format!(
            "SELECT posterior_mean(q{class}), posterior_var(q{class}), posterior_quantile(q{class}, 1e-10), posterior_quantile(q{class}, 1 - 1e-10) FROM (SELECT {expr} AS q{from})"
        );
        let b = query(&c, &sql).await;
        let v = |i: usize| b[0].column(i).as_primitive::<Float64Type>().value(0);
        close(v(0), *mean, 1e-14);
        close(v(1), *var, 1e-12);
        // Extreme quantiles are finite and ordered around the mean.
        assert!(v(2).is_finite() && v(3).is_finite(), "{sql}");
        assert!(
            v(2) <= *mean && *mean <= v(3),
            "{sql}: {} {} {}",
            v(2),
            mean,
            v(3)
        );
    }
}

// posterior_under, worked by hand: a child with 3 of 10 under a parent whose
// posterior is Beta(2 + 30, 18 + 70); without the child's own 3 of 10 the parent
// says 29 / 110, so with strength 20 the child's prior is Beta(20 * 29/110,
// 20 * 81/110) and its posterior mean (20 * 29/110 + 3) / (20 + 10) = 0.2757575...
// NULL parent: the child as it is; NULL own: nothing removed; NULL p or strength:
// NULL. Every family keeps its data and takes the centre's mean.
#[tokio::test]
async fn posterior_under_centres_a_child_on_its_parent() {
    let ctx = ctx().await;
    let child = "beta_posterior_counts(3, 10, beta_prior(0.5, 0.5))";
    let parent = "beta_posterior_counts(30, 100, beta_prior(2, 18))";
    let own = "beta_posterior_counts(3, 10, beta_prior(1, 1))";
    let mean = |parent: &str, own: &str, s: &str| {
        format!("SELECT posterior_mean(posterior_under({child}, {parent}, {own}, {s}))")
    };
    close(
        one(&ctx, &mean(parent, own, "20")).await,
        (20.0 * 29.0 / 110.0 + 3.0) / 30.0,
        1e-14,
    );
    // Nothing removed: centre 32 / 120.
    close(
        one(&ctx, &mean(parent, "NULL", "20")).await,
        (20.0 * 32.0 / 120.0 + 3.0) / 30.0,
        1e-14,
    );
    // Data weight is the child's alone; the prior's weight is the strength.
    close(
        one(
            &ctx,
            &format!("SELECT posterior_data_weight(posterior_under({child}, {parent}, {own}, 20))"),
        )
        .await,
        10.0,
        0.0,
    );
    // No parent: the child under its own prior Beta(0.5, 0.5).
    close(one(&ctx, &mean("NULL", own, "20")).await, 3.5 / 11.0, 1e-14);
    assert_eq!(
        floats(&ctx, &format!("SELECT posterior_mean(posterior_under(CASE WHEN false THEN {child} END, {parent}, NULL, 20))")).await,
        vec![None]
    );
    assert_eq!(
        floats(&ctx, &mean(parent, own, "CAST(NULL AS DOUBLE)")).await,
        vec![None]
    );
    // Gamma: parent Gamma(1 + 40, 1 + 20) without the child's 4 events in 2 units
    // says 37 / 19; strength 5 (exposure units): Gamma(5 * 37/19 + 4, 5 + 2).
    close(
        one(&ctx, "SELECT posterior_mean(posterior_under(gamma_posterior(4, 2.0, gamma_prior(1, 1)), \
            gamma_posterior(40, 20.0, gamma_prior(1, 1)), gamma_posterior(4, 2.0, gamma_prior(1, 1)), 5))").await,
        (5.0 * 37.0 / 19.0 + 4.0) / 7.0,
        1e-14,
    );
    // NIG: the centre's mean, kappa0 = strength, and the child's variance belief.
    let nig = "SELECT posterior_mean(posterior_under(p, q, NULL, 4)) FROM \
        (SELECT nig_posterior(amount, nig_prior(0, 0.001, 2, 1)) FILTER (WHERE breed = 'beagle') AS p, \
                nig_posterior(amount, nig_prior(0, 0.001, 2, 1)) AS q FROM appts)";
    let (sum, n) = (40.0 * 50.0 + 1.5 * 780.0 + 30.0 * 10.0, 40.0);
    let beagle: f64 = (0..40).step_by(4).map(|i| 50.0 + 1.5 * i as f64).sum();
    let centre = sum / (n + 0.001);
    close(
        one(&ctx, nig).await,
        (4.0 * centre + beagle) / (4.0 + 10.0),
        1e-12,
    );
}

// Bad arguments name the function, the argument and the allowed range.
#[tokio::test]
async fn posterior_under_and_fit_strength_refuse_bad_arguments() {
    let ctx = ctx().await;
    let b = "beta_posterior_counts(3, 10, beta_prior(1, 1))";
    let g = "gamma_posterior(4, 2.0, gamma_prior(1, 1))";
    for (sql, fragments) in [
        (format!("SELECT posterior_under({b}, {b}, NULL, 0)"), vec!["posterior_under", "strength", "> 0"]),
        (format!("SELECT posterior_under({b}, {b}, NULL, 'nan'::double)"), vec!["posterior_under", "strength"]),
        (format!("SELECT posterior_under({b}, {g}, NULL, 5)"), vec!["posterior_under", "parent", "Beta"]),
        (format!("SELECT posterior_under({b}, {b}, NULL)"), vec!["posterior_under", "4"]),
        (
            format!("SELECT posterior_under({b}, {b}, beta_posterior_counts(30, 100, beta_prior(1, 1)), 5)"),
            vec!["posterior_under", "cannot remove more evidence"],
        ),
        ("SELECT fit_strength(beta_prior(1, 1), gamma_prior(1, 1), NULL)".into(), vec!["fit_strength", "parent"]),
        ("SELECT fit_strength(beta_prior(1, 1), beta_prior(1, 1))".into(), vec!["fit_strength", "3 arguments"]),
    ] {
        let e = error(&ctx, &sql).await;
        for f in fragments {
            assert!(e.contains(f), "{sql}: {e}");
        }
    }
    // No child with a parent: NULL, not a number.
    assert_eq!(
        floats(&ctx, "SELECT fit_strength(p, CASE WHEN false THEN p END, NULL) FROM (SELECT beta_prior(1, 1) AS p)").await,
        vec![None]
    );
}

// `posterior_pool_before` walks a partition once; it must give what `posterior_pool`
// gives over the frame it replaces, to the bit, for every family: ROWS up to the
// row before without a gap, RANGE up to `gap` before with one (on one row per level
// and time, as as-of encodings have them), under any partitioning and batch size.
#[tokio::test]
async fn pool_before_equals_the_frames_to_the_bit() {
    let fits = [
        "beta_posterior(no_show, beta_prior(1, 2))",
        "gamma_posterior(visits, 1.5, gamma_prior(2, 1))",
        "nig_posterior(amount, nig_prior(70, 0.5, 2, 40))",
        "dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show', 'late_cancel'], 0.5))",
    ];
    for (partitions, batch) in [(4, 8192), (1, 3)] {
        let c = ctx_with(partitions, batch).await;
        for fit in fits {
            let grouped = format!(
                "(SELECT breed, CAST(t / 3 AS DOUBLE) AS d, {fit} AS p FROM appts GROUP BY breed, t / 3)"
            );
            for (before, frame) in [
                (
                    "posterior_pool_before(p, d)",
                    "ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING",
                ),
                (
                    "posterior_pool_before(p, d, 2)",
                    "RANGE BETWEEN UNBOUNDED PRECEDING AND 2 PRECEDING",
                ),
                (
                    "posterior_pool_before(p, d, 0.5)",
                    "RANGE BETWEEN UNBOUNDED PRECEDING AND 0.5 PRECEDING",
                ),
            ] {
                let sql = format!(
                    "SELECT {before} OVER (PARTITION BY breed ORDER BY d), \
                     posterior_pool(p) OVER (PARTITION BY breed ORDER BY d {frame}) \
                     FROM {grouped} ORDER BY breed, d"
                );
                let batches = query(&c, &sql).await;
                let (mut nulls, mut rows) = (0, 0);
                for b in &batches {
                    assert_eq!(b.column(0).to_data(), b.column(1).to_data(), "{sql}");
                    nulls += b.column(0).null_count();
                    rows += b.num_rows();
                }
                // Each breed's first time reads nothing: NULL, as the empty frame.
                assert!(nulls >= 4 && nulls < rows, "{sql}: {nulls} of {rows}");
            }
        }
    }
}

// Rows at one time read the same pool and never each other: one posterior per
// appointment (ties at each d) reads what the day-level pool of earlier days reads.
// A NULL time reads nothing and lends nothing.
#[tokio::test]
async fn pool_before_keeps_rows_of_one_time_apart() {
    let c = ctx().await;
    let fit = "beta_posterior(no_show, beta_prior(1, 2))";
    let per_row = format!(
        "SELECT m FROM (SELECT t, posterior_mean(posterior_pool_before(p, d) \
                OVER (PARTITION BY breed ORDER BY d)) AS m \
         FROM (SELECT breed, t, CASE WHEN t = 39 THEN NULL ELSE t / 3 END AS d, {fit} AS p \
               FROM appts GROUP BY breed, t)) ORDER BY t"
    );
    let per_day = format!(
        "SELECT m FROM (SELECT a.t, posterior_mean(posterior_pool(g.p) OVER (PARTITION BY g.breed \
                ORDER BY g.d ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)) AS m \
         FROM (SELECT breed, t / 3 AS d, {fit} AS p FROM appts WHERE t <> 39 GROUP BY breed, t / 3) g \
         JOIN appts a ON a.breed = g.breed AND a.t / 3 = g.d) ORDER BY t"
    );
    let (got, want) = (floats(&c, &per_row).await, floats(&c, &per_day).await);
    assert_eq!(got.len(), 40);
    assert_eq!(&got[..39], &want[..], "per row against per day");
    assert_eq!(got[39], None, "a NULL time reads nothing");
}

#[tokio::test]
async fn pool_before_refuses_what_it_cannot_read() {
    let c = ctx().await;
    let grouped = "(SELECT breed, t, beta_posterior(no_show, beta_prior(1, 2)) AS p FROM appts GROUP BY breed, t)";
    for (call, window, fragments) in [
        (
            "posterior_pool_before(p, t)",
            "ORDER BY t DESC",
            vec!["posterior_pool_before", "not ordered by argument t"],
        ),
        (
            "posterior_pool_before(p, t)",
            "",
            vec!["posterior_pool_before", "not ordered by argument t"],
        ),
        (
            "posterior_pool_before(p, t, 0)",
            "ORDER BY t",
            vec!["posterior_pool_before", "gap = 0", "> 0"],
        ),
        (
            "posterior_pool_before(p, t, -2)",
            "ORDER BY t",
            vec!["gap = -2"],
        ),
        (
            "posterior_pool_before(p, t, t + 1)",
            "ORDER BY t",
            vec!["gap must be one number for every row"],
        ),
        (
            "posterior_pool_before(p, CAST(t AS DOUBLE) / 0.0, 1)",
            "ORDER BY t",
            vec!["argument t is NaN"],
        ),
        (
            "posterior_pool_before(p, 'x', 1)",
            "ORDER BY t",
            vec!["argument t is of type Utf8", "must be numbers"],
        ),
        (
            "posterior_pool_before(p, t)",
            "ORDER BY t RANGE BETWEEN 30 PRECEDING AND 1 PRECEDING",
            vec![
                "posterior_pool_before",
                "has a window frame",
                "leave it out",
            ],
        ),
        (
            "posterior_pool_before(p)",
            "ORDER BY t",
            vec!["takes 2 to 3 arguments", "usage"],
        ),
        (
            "posterior_pool_before(t, t)",
            "ORDER BY t",
            vec!["posterior_pool_before", "argument p", "posterior struct"],
        ),
        (
            "posterior_pool_before(CASE WHEN t < 20 THEN p ELSE beta_prior(3, 3) END, t)",
            "ORDER BY t",
            vec![
                "posterior_pool_before",
                "beta_prior(1, 2)",
                "beta_prior(3, 3)",
            ],
        ),
    ] {
        let sql = format!("SELECT {call} OVER (PARTITION BY breed {window}) FROM {grouped}");
        let e = error(&c, &sql).await;
        for f in fragments {
            assert!(e.contains(f), "{sql}\n  missing '{f}' in: {e}");
        }
    }
}

// Through the foreign-function interface (Python) the planner's look at the OVER
// clause is not forwarded, so `posterior_pool_before` there reads the frame from the
// window expression's display name (which the interface does forward): no frame
// clause, or one the planner lets through, gives the native function's posteriors to
// the bit; any other frame is refused in words instead of ignored. Here the foreign
// variant is registered on a native session in place of the native one.
#[tokio::test]
async fn pool_before_through_the_foreign_interface_refuses_frames_by_name() {
    let native = ctx().await;
    let foreign = ctx().await;
    for f in posterity::foreign_window_functions() {
        foreign.register_udwf(f);
    }
    // One posterior per appointment, at times with ties (ten per day).
    let rows = "(SELECT breed, t, CAST(t / 10 AS DOUBLE) AS d, \
                beta_posterior(no_show, beta_prior(1, 2)) AS p FROM appts GROUP BY breed, t)";
    let call = |window: &str| {
        format!(
            "SELECT posterior_mean(posterior_pool_before(p, d) OVER (PARTITION BY breed {window})) \
             AS m FROM {rows} ORDER BY t"
        )
    };
    let want = floats(&native, &call("ORDER BY d")).await;
    assert_eq!(want.len(), 40);
    assert!(want.iter().any(Option::is_none) && want.iter().any(Option::is_some));
    for window in [
        "ORDER BY d",
        "ORDER BY d RANGE BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW",
        "ORDER BY d ROWS BETWEEN UNBOUNDED PRECEDING AND CURRENT ROW",
        "ORDER BY d ROWS BETWEEN UNBOUNDED PRECEDING AND UNBOUNDED FOLLOWING",
        "ORDER BY d, t",
    ] {
        assert_eq!(floats(&foreign, &call(window)).await, want, "{window}");
    }
    for window in [
        "ORDER BY d RANGE BETWEEN 30 PRECEDING AND 1 PRECEDING",
        "ORDER BY d ROWS BETWEEN 2 PRECEDING AND CURRENT ROW",
        "ORDER BY d ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING",
        "ORDER BY d ROWS BETWEEN UNBOUNDED PRECEDING AND 2 FOLLOWING",
    ] {
        let e = error(&foreign, &call(window)).await;
        let frame = window.trim_start_matches("ORDER BY d ");
        for f in [
            "posterior_pool_before",
            "has a window frame",
            frame,
            "leave it out",
        ] {
            assert!(e.contains(f), "{window}\n  missing '{f}' in: {e}");
        }
        // The native planner refuses the same frame before the query runs.
        assert!(error(&native, &call(window)).await.contains("leave it out"));
    }
}

// The engine drops OVER, FILTER, DISTINCT and ORDER BY written on a scalar function
// without a word (a reader around a fit, instead of on the fit): a wrong number with
// no error. `clauses::check_sql` (run by the shell and by Python's ctx.sql) refuses
// each, naming the function and the clause; written on the fit, the same clause is
// accepted and does its work. The breeds' counts are the table's own.
#[tokio::test]
async fn clauses_the_engine_would_drop_are_refused() {
    let ctx = ctx().await;
    let refused = [
        ("SELECT breed, posterior_mean(beta_posterior(no_show, beta_prior(2, 18))) FILTER (WHERE t < 0) FROM appts GROUP BY breed", "posterior_mean: FILTER"),
        ("SELECT posterior_mean(beta_posterior(no_show, beta_prior(2, 18))) OVER (PARTITION BY breed ORDER BY t) FROM appts", "posterior_mean: OVER"),
        ("SELECT posterior_sd(DISTINCT beta_prior(2, 18))", "posterior_sd: DISTINCT"),
        ("SELECT posterior_quantile(beta_prior(2, 18), 0.5 ORDER BY 1)", "posterior_quantile: ORDER BY"),
        ("SELECT abs(t) FILTER (WHERE t > 3) FROM appts", "abs: FILTER"),
        ("EXPLAIN SELECT Posterior_Mean(beta_prior(2, 18)) OVER ()", "posterior_mean: OVER"),
        ("COPY (SELECT posterior_mean(beta_prior(2, 18)) OVER () FROM appts) TO '/dev/null' STORED AS CSV", "posterior_mean: OVER"),
        ("SELECT * FROM appts WHERE t IN (SELECT posterior_mean(beta_prior(1, 1)) FILTER (WHERE true))", "posterior_mean: FILTER"),
    ];
    for (sql, said) in refused {
        let e = posterity::clauses::check_sql(&ctx, sql)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains(&format!("{said} would be ignored")),
            "{sql}: {e}"
        );
        let e = posterity::clauses::check_sql_default(sql)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains(&format!("{said} would be ignored")),
            "{sql}: {e}"
        );
    }
    // On the fit, each clause does its work and passes the check.
    let on_the_fit = [
        "SELECT posterior_mean(beta_posterior(no_show, beta_prior(2, 18)) FILTER (WHERE t < 0)) AS m, \
         breed, COUNT(DISTINCT t) FROM appts GROUP BY breed",
        "SELECT posterior_mean(beta_posterior(no_show, beta_prior(2, 18)) OVER (PARTITION BY breed)) FROM appts",
    ];
    for sql in on_the_fit {
        posterity::clauses::check_sql(&ctx, sql).unwrap();
        posterity::clauses::check_sql_default(sql).unwrap();
    }
    let filtered = floats(&ctx, on_the_fit[0]).await;
    assert!(
        filtered.len() == 4 && filtered.iter().all(|m| *m == Some(0.1)),
        "{filtered:?}"
    );
    assert_eq!(floats(&ctx, on_the_fit[1]).await.len(), 40);
    // DISTINCT on a fit itself is refused by the check too: an engine without the
    // planning rule rewrites a lone DISTINCT fit into plain rows before the fit
    // could refuse it.
    let lone = "SELECT posterior_mean(beta_posterior(DISTINCT no_show)) FROM appts";
    for e in [
        posterity::clauses::check_sql(&ctx, lone),
        posterity::clauses::check_sql_default(lone),
    ] {
        let e = e.unwrap_err().to_string();
        assert!(
            e.contains("beta_posterior: DISTINCT is not supported"),
            "{e}"
        );
    }
    // The engine itself still drops the clause: when this fails, it refuses or honours
    // it, and the check may go.
    let dropped = one(
        &ctx,
        "SELECT posterior_mean(beta_posterior(no_show, beta_prior(2, 18))) FILTER (WHERE t < 0) FROM appts",
    )
    .await;
    assert!((dropped - 0.1).abs() > 0.01, "{dropped}");
}

// For Python's engine, which cannot ask a fit for its value on no rows, windowed
// fits are written as COALESCE(fit, prior): the call's prior, or the function's
// default (the shell's empty frames give the same, checked below). Nothing else is
// touched, and on a session posterity plans for the rewrite changes no number.
#[tokio::test]
async fn windowed_fits_fall_back_to_their_prior_in_sql() {
    use posterity::window_priors::with_window_priors;
    let rewritten = |sql: &str| with_window_priors(sql);
    let windowed = "SELECT posterior_mean(beta_posterior(no_show, beta_prior(2, 18)) OVER \
                    (PARTITION BY breed ORDER BY t ROWS BETWEEN UNBOUNDED PRECEDING AND 1 \
                    PRECEDING)) AS m FROM appts ORDER BY t, breed";
    let sql = rewritten(windowed).unwrap();
    assert!(
        sql.contains("COALESCE(beta_posterior(no_show, beta_prior(2, 18)) OVER (PARTITION BY breed ORDER BY t ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING), beta_prior(2, 18))"),
        "{sql}"
    );
    // Defaults: the prior an empty frame gets in a session posterity plans for.
    let ctx = ctx().await;
    for (fit, data) in [
        ("beta_posterior", "no_show"),
        ("BETA_POSTERIOR_COUNTS", "no_show, 1"),
        ("gamma_posterior", "visits, 1"),
        ("nig_posterior", "amount"),
    ] {
        // t is unique: the first row by t is its breed's first, with an empty frame.
        let first_row = format!(
            "SELECT m FROM (SELECT t, posterior_mean({fit}({data}) OVER (PARTITION BY breed \
             ORDER BY t ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)) AS m FROM appts) \
             ORDER BY t LIMIT 1"
        );
        let sql = rewritten(&first_row).unwrap();
        assert!(
            sql.contains(&format!("COALESCE({fit}({data}) OVER")),
            "{sql}"
        );
        let no_rows = format!("SELECT posterior_mean({fit}({data})) FROM appts WHERE false");
        let default = one(&ctx, &no_rows).await;
        assert_eq!(one(&ctx, &first_row).await, default, "{first_row}");
        assert_eq!(one(&ctx, &sql).await, default, "{sql}");
    }
    // The same numbers on a session posterity plans for.
    assert_eq!(
        floats(&ctx, windowed).await,
        floats(&ctx, &rewritten(windowed).unwrap()).await
    );
    // A scalar subquery of one fit over its rows: decorrelated, a breed without
    // rows there is a missing group (the engine correlates on equalities only).
    let correlated = "SELECT posterior_mean((SELECT beta_posterior(i.no_show, \
                      beta_prior(2, 18)) FROM appts i WHERE i.breed = o.breed AND i.t < 3)) \
                      AS m FROM appts o ORDER BY o.t";
    let sql = rewritten(correlated).unwrap();
    assert!(
        sql.contains("posterior_mean(COALESCE((SELECT beta_posterior(i.no_show, beta_prior(2, 18)) FROM appts i WHERE i.breed = o.breed AND i.t < 3), beta_prior(2, 18)))"),
        "{sql}"
    );
    let (native, coalesced) = (floats(&ctx, correlated).await, floats(&ctx, &sql).await);
    assert_eq!(native, coalesced);
    // Collies (t = 3, 7, ...) have no rows before t = 3; the others one each.
    assert_eq!(native[3], Some(0.1));
    assert!(native[..3].iter().all(|m| *m != Some(0.1)), "{native:?}");
    // EXPLAIN and COPY are rewritten inside; a window elsewhere, a plain fit, a fit
    // without a prior of its own (Dirichlet), several statements and bad SQL are left.
    for sql in [
        &format!("EXPLAIN {windowed}"),
        &format!("COPY ({windowed}) TO 'x.csv'"),
    ] {
        assert!(rewritten(sql).unwrap().contains("COALESCE("), "{sql}");
    }
    for sql in [
        "SELECT SUM(t) OVER (ORDER BY t) FROM appts",
        "SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) FROM appts GROUP BY breed",
        "SELECT dirichlet_posterior(outcome) OVER () FROM appts",
        "SELECT (SELECT beta_posterior(no_show) FROM appts GROUP BY breed LIMIT 1)",
        "SELECT (SELECT posterior_mean(beta_posterior(no_show)) FROM appts)",
        "SELECT 1; SELECT beta_posterior(no_show) OVER () FROM appts",
        "SELECT beta_posterior(no_show) OVER ( FROM",
    ] {
        assert_eq!(rewritten(sql), None, "{sql}");
    }
}

// A query that starts with FROM and has no SELECT is planned as one of no columns
// (a shell could only say "done"): refused at any depth, with the query to write.
// FROM ... SELECT passes.
#[tokio::test]
async fn a_query_of_from_alone_is_refused() {
    let ctx = ctx().await;
    for sql in [
        "FROM appts",
        "FROM appts LIMIT 2",
        "SELECT COUNT(*) FROM (FROM appts)",
        "WITH b AS (FROM appts) SELECT COUNT(*) FROM b",
        "SELECT t FROM appts UNION ALL FROM appts",
        "EXPLAIN FROM appts",
        "COPY (FROM appts) TO '/dev/null' STORED AS CSV",
    ] {
        for e in [
            posterity::clauses::check_sql(&ctx, sql),
            posterity::clauses::check_sql_default(sql),
        ] {
            let e = e.unwrap_err().to_string();
            assert!(
                e.contains("a query that starts with FROM needs a SELECT")
                    && e.contains("SELECT * FROM"),
                "{sql}: {e}"
            );
        }
    }
    let passes = "FROM appts SELECT COUNT(*) AS n";
    posterity::clauses::check_sql(&ctx, passes).unwrap();
    posterity::clauses::check_sql_default(passes).unwrap();
    assert_eq!(
        one(&ctx, "FROM appts SELECT CAST(COUNT(*) AS DOUBLE)").await,
        40.0
    );
    // The engine itself still plans FROM alone as no columns: when this fails, it
    // reads it as SELECT * and the refusal may go.
    let batches = ctx
        .sql("FROM appts")
        .await
        .unwrap()
        .collect()
        .await
        .unwrap();
    assert!(batches.iter().all(|b| b.num_columns() == 0), "{batches:?}");
}
