//! Benchmarks: posterity's aggregates, join-back readers and family readers
//! against the engine's own COUNT/SUM group-by on the same data, in one run.
//!
//!   cargo bench --bench fit -- [--rows N] [--levels L] [--data DIR] [--runs R] [--readers-only]
//!
//! The data set (Parquet, deterministic) is written to DIR/data_<rows>_<levels>.parquet
//! on first use and shared with the peer script (benches/peers.py). Timings go to
//! stdout as a Markdown table and to DIR/posterity_<rows>_<levels>.json.

use std::path::PathBuf;
use std::sync::Arc;
use std::time::Instant;

use datafusion::arrow::array::{ArrayRef, Float64Array, Int64Array, RecordBatch, StringArray};
use datafusion::arrow::datatypes::{DataType, Field, Schema};
use datafusion::datasource::MemTable;
use datafusion::execution::session_state::SessionStateBuilder;
use datafusion::prelude::{ParquetReadOptions, SessionConfig, SessionContext};
use posterity::family::rng::{mix64, uniform};
use posterity::family::Marginal;

struct Options {
    rows: usize,
    levels: usize,
    dir: PathBuf,
    runs: usize,
}

fn options() -> Options {
    let args: Vec<String> = std::env::args().collect();
    let get = |flag: &str| {
        args.iter()
            .position(|a| a == flag)
            .and_then(|i| args.get(i + 1))
            .cloned()
    };
    Options {
        rows: get("--rows")
            .and_then(|v| v.parse().ok())
            .unwrap_or(10_000_000),
        levels: get("--levels")
            .and_then(|v| v.parse().ok())
            .unwrap_or(30_000),
        dir: get("--data").map_or_else(|| PathBuf::from("bench-data"), PathBuf::from),
        runs: get("--runs").and_then(|v| v.parse().ok()).unwrap_or(5),
    }
}

fn zipf(levels: usize) -> Vec<f64> {
    let mut acc = 0.0;
    (1..=levels)
        .map(|r| {
            acc += 1.0 / (r as f64).powf(1.1);
            acc
        })
        .collect()
}

/// Keys with `levels`, 2/3 of that and 50 Zipf levels; a 0/1 target, a continuous
/// target and a four-class target, all depending on the first key.
fn generate(rows: usize, levels: usize) -> Vec<RecordBatch> {
    let (z1, z2, z3) = (zipf(levels), zipf((levels * 2 / 3).max(1)), zipf(50));
    let names = |n: usize, p: &str| {
        (0..n)
            .map(|i| format!("{p}{i:07}"))
            .collect::<Vec<String>>()
    };
    let (n1, n2, n3) = (names(z1.len(), "a"), names(z2.len(), "b"), names(50, "c"));
    let classes = ["attended", "no_show", "late_cancellation", "rescheduled"];
    let schema = Arc::new(Schema::new(vec![
        Field::new("key", DataType::Utf8, false),
        Field::new("key2", DataType::Utf8, false),
        Field::new("key3", DataType::Utf8, false),
        Field::new("y", DataType::Int64, false),
        Field::new("x", DataType::Float64, false),
        Field::new("class", DataType::Utf8, false),
    ]));
    let mut state = 17u64;
    let mut draw = |cum: &[f64]| {
        state = mix64(state);
        let u = uniform(state, &[]) * cum[cum.len() - 1];
        cum.partition_point(|c| *c < u).min(cum.len() - 1)
    };
    let mut out = Vec::new();
    let mut left = rows;
    let mut noise = 99u64;
    while left > 0 {
        let n = left.min(131_072);
        left -= n;
        let (mut k1, mut k2, mut k3, mut ys, mut xs, mut cs) =
            (vec![], vec![], vec![], vec![], vec![], vec![]);
        for _ in 0..n {
            let (a, b, c) = (draw(&z1), draw(&z2), draw(&z3));
            noise = mix64(noise);
            let v = uniform(noise, &[]);
            k1.push(n1[a].as_str());
            k2.push(n2[b].as_str());
            k3.push(n3[c].as_str());
            ys.push(i64::from(v < 0.05 + 0.1 * (a % 7) as f64 / 7.0));
            xs.push(100.0 + 10.0 * v + (a % 13) as f64);
            cs.push(classes[((v * 4.0) as usize + a) % 4]);
        }
        let columns: Vec<ArrayRef> = vec![
            Arc::new(StringArray::from(k1)),
            Arc::new(StringArray::from(k2)),
            Arc::new(StringArray::from(k3)),
            Arc::new(Int64Array::from(ys)),
            Arc::new(Float64Array::from(xs)),
            Arc::new(StringArray::from(cs)),
        ];
        out.push(RecordBatch::try_new(schema.clone(), columns).unwrap());
    }
    out
}

async fn median_seconds(ctx: &SessionContext, sql: &str, runs: usize) -> f64 {
    let mut times = Vec::new();
    for _ in 0..runs {
        let start = Instant::now();
        let batches = ctx.sql(sql).await.unwrap().collect().await.unwrap();
        std::hint::black_box(batches);
        times.push(start.elapsed().as_secs_f64());
    }
    times.sort_by(|a, b| a.total_cmp(b));
    times[runs / 2]
}

fn per_second(n: usize, f: impl Fn(usize) -> f64) -> f64 {
    let start = Instant::now();
    let mut sink = 0.0;
    for i in 0..n {
        sink += f(i);
    }
    std::hint::black_box(sink);
    n as f64 / start.elapsed().as_secs_f64()
}

fn peak_rss_mib() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines().find(|l| l.starts_with("VmHWM:")).map(|l| {
                l.split_whitespace()
                    .nth(1)
                    .unwrap_or("0")
                    .parse::<f64>()
                    .unwrap_or(0.0)
            })
        })
        .unwrap_or(0.0)
        / 1024.0
}

#[tokio::main]
async fn main() {
    if std::env::args().any(|a| a == "--readers-only") {
        readers();
        return;
    }
    let o = options();
    std::fs::create_dir_all(&o.dir).unwrap();
    let file = o.dir.join(format!("data_{}_{}.parquet", o.rows, o.levels));
    let partitions = std::thread::available_parallelism().map_or(2, |n| n.get());
    // The engine as configured by the shell: posterity's functions and its join rule.
    let config = SessionConfig::new().with_target_partitions(partitions);
    let ctx = SessionContext::new_with_state(
        posterity::optimizer::with_build_on_aggregate(
            SessionStateBuilder::new()
                .with_config(config.clone())
                .with_default_features(),
        )
        .build(),
    );
    posterity::register(&ctx);
    // The engine's defaults, to show what the join rule changes.
    let plain = SessionContext::new_with_config(config);
    posterity::register(&plain);
    if !file.exists() {
        let batches = generate(o.rows, o.levels);
        let schema = batches[0].schema();
        ctx.register_table(
            "gen",
            Arc::new(MemTable::try_new(schema, vec![batches]).unwrap()),
        )
        .unwrap();
        ctx.sql(&format!(
            "COPY gen TO '{}' STORED AS PARQUET",
            file.display()
        ))
        .await
        .unwrap()
        .collect()
        .await
        .unwrap();
        ctx.deregister_table("gen").unwrap();
    }
    // Load into memory, split across partitions, so every query measures compute.
    let df = ctx
        .read_parquet(file.to_str().unwrap(), ParquetReadOptions::default())
        .await
        .unwrap();
    let schema = Arc::new(df.schema().as_arrow().clone());
    let batches = df.collect().await.unwrap();
    let chunk = batches.len().div_ceil(partitions).max(1);
    let parts: Vec<Vec<RecordBatch>> = batches.chunks(chunk).map(|c| c.to_vec()).collect();
    let table = Arc::new(MemTable::try_new(schema, parts).unwrap());
    ctx.register_table("t", table.clone()).unwrap();
    plain.register_table("t", table).unwrap();
    ctx.sql("CREATE TABLE enc AS SELECT key, beta_posterior(y) AS p, COUNT(*) AS n, SUM(y) AS s FROM t GROUP BY key")
        .await
        .unwrap()
        .collect()
        .await
        .unwrap();

    println!(
        "rows {}, levels {}, partitions {partitions}, median of {} runs\n",
        o.rows, o.levels, o.runs
    );
    let baseline_sql = "SELECT key, COUNT(*), SUM(y) FROM t GROUP BY key";
    let baseline = median_seconds(&ctx, baseline_sql, o.runs).await;
    let cases: &[(&str, &str, &str)] = &[
        ("fit", "fit: beta_posterior(y) GROUP BY key", "SELECT key, beta_posterior(y) FROM t GROUP BY key"),
        ("fit_nig", "fit: nig_posterior(x) GROUP BY key", "SELECT key, nig_posterior(x) FROM t GROUP BY key"),
        ("engine_moments", "engine: COUNT(*), SUM(x), SUM(x*x) GROUP BY key", "SELECT key, COUNT(*), SUM(x), SUM(x * x) FROM t GROUP BY key"),
        ("fit_dirichlet", "fit: dirichlet_posterior(class) GROUP BY key", "SELECT key, dirichlet_posterior(class, dirichlet_prior(['attended', 'no_show', 'late_cancellation', 'rescheduled'], 1)) FROM t GROUP BY key"),
        ("join_engine", "join back + mean by hand (t LEFT JOIN enc)", "SELECT SUM((e.s + 0.5) / (e.n + 1.0)) FROM t LEFT JOIN enc e USING (key)"),
        ("join_reader", "join back + posterior_mean (t LEFT JOIN enc)", "SELECT SUM(posterior_mean(e.p)) FROM t LEFT JOIN enc e USING (key)"),
        ("join_reader_right", "join back + posterior_mean (enc RIGHT JOIN t)", "SELECT SUM(posterior_mean(e.p)) FROM enc e RIGHT JOIN t USING (key)"),
        ("fit_join", "fit + join back + posterior_mean, one query", "SELECT SUM(posterior_mean(e.p)) FROM t LEFT JOIN (SELECT key, beta_posterior(y) AS p FROM t GROUP BY key) e USING (key)"),
        ("oof5", "5-fold out-of-fold fit + join back + mean", "WITH f AS (SELECT key, y, fold_of(key, 5) AS fold FROM t), tot AS (SELECT key, beta_posterior(y) AS p FROM f GROUP BY key), per AS (SELECT key, fold, beta_posterior(y) AS p FROM f GROUP BY key, fold) SELECT SUM(posterior_mean(posterior_subtract(tot.p, per.p))) FROM f JOIN tot USING (key) JOIN per ON per.key = f.key AND per.fold = f.fold"),
        ("quantiles", "quantile(0.05) over the encoding table", "SELECT SUM(posterior_quantile(p, 0.05)) FROM enc"),
        ("fit_prior", "fit_prior (beta-binomial) over the encoding table", "SELECT fit_prior(p) FROM enc"),
        // Pooling (as-of encodings pool per-(level, time) fits in a running window).
        ("pool_engine", "engine: per-(key, key2) COUNT/SUM, summed per key", "SELECT key, SUM(n), SUM(s) FROM (SELECT key, key2, COUNT(*) AS n, SUM(y) AS s FROM t GROUP BY key, key2) GROUP BY key"),
        ("pool", "posterior_pool of per-(key, key2) fits, per key", "SELECT key, posterior_pool(p) FROM (SELECT key, key2, beta_posterior(y) AS p FROM t GROUP BY key, key2) GROUP BY key"),
        ("pool_window_engine", "engine: running SUM windows over per-(key, key2) counts", "SELECT SUM(m) FROM (SELECT (COALESCE(SUM(s) OVER w, 0) + 0.5) / (COALESCE(SUM(n) OVER w, 0) + 1.0) AS m FROM (SELECT key, key2, COUNT(*) AS n, SUM(y) AS s FROM t GROUP BY key, key2) WINDOW w AS (PARTITION BY key ORDER BY key2 ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING))"),
        ("pool_window", "running posterior_pool window (as-of) + posterior_mean", "SELECT SUM(m) FROM (SELECT posterior_mean(COALESCE(posterior_pool(p) OVER (PARTITION BY key ORDER BY key2 ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING), beta_prior(0.5, 0.5))) AS m FROM (SELECT key, key2, beta_posterior(y) AS p FROM t GROUP BY key, key2))"),
        ("pool_before", "posterior_pool_before window (as-of, what encode runs) + posterior_mean", "SELECT SUM(m) FROM (SELECT posterior_mean(COALESCE(posterior_pool_before(p, key2) OVER (PARTITION BY key ORDER BY key2), beta_prior(0.5, 0.5))) AS m FROM (SELECT key, key2, beta_posterior(y) AS p FROM t GROUP BY key, key2))"),
    ];
    let mut json = vec![format!("\"baseline\": {baseline}")];
    println!("| query | seconds | ratio to COUNT/SUM group-by |");
    println!("|---|---|---|");
    println!("| engine: COUNT(*), SUM(y) GROUP BY key | {baseline:.3} | 1.00 |");
    for (id, name, sql) in cases {
        let t = median_seconds(&ctx, sql, o.runs).await;
        println!("| {name} | {t:.3} | {:.2} |", t / baseline);
        json.push(format!("\"{id}\": {t}"));
    }
    let oof5 = cases.iter().find(|c| c.0 == "oof5").map_or("", |c| c.2);
    for (id, name, sql) in [
        ("fit_join_default", "fit + join back + posterior_mean, engine defaults (no join rule)", "SELECT SUM(posterior_mean(e.p)) FROM t LEFT JOIN (SELECT key, beta_posterior(y) AS p FROM t GROUP BY key) e USING (key)"),
        ("oof5_default", "5-fold out-of-fold, engine defaults (no join rule)", oof5),
    ] {
        let t = median_seconds(&plain, sql, o.runs).await;
        println!("| {name} | {t:.3} | {:.2} |", t / baseline);
        json.push(format!("\"{id}\": {t}"));
    }
    println!("\npeak RSS {:.0} MiB (data held in memory)", peak_rss_mib());
    std::fs::write(
        o.dir
            .join(format!("posterity_{}_{}.json", o.rows, o.levels)),
        format!("{{{}}}\n", json.join(", ")),
    )
    .unwrap();

    readers();
}

/// The family readers on one core, and the tail evaluations each quantile costs.
fn readers() {
    let evaluations = |f: &dyn Fn(usize) -> f64, n: usize| {
        let before = posterity::family::dist::quantile_evaluations();
        let sum: f64 = (0..n).map(f).sum();
        std::hint::black_box(sum);
        (posterity::family::dist::quantile_evaluations() - before) as f64 / n as f64
    };
    let n = 2_000_000;
    let beta = |i: usize| Marginal::Beta {
        a: 0.5 + (i % 97) as f64,
        b: 10.5 + (i % 1013) as f64,
    };
    let mean = per_second(n * 5, |i| beta(i).mean() + beta(i).var());
    let quantile = per_second(n / 4, |i| beta(i).quantile(0.05));
    let gamma_q = per_second(n / 4, |i| {
        Marginal::Gamma {
            shape: 0.5 + (i % 301) as f64,
            rate: 1.0,
        }
        .quantile(0.95)
    });
    let t_q = per_second(n / 4, |i| {
        Marginal::StudentT {
            loc: 0.0,
            scale: 1.0,
            dof: 3.0 + (i % 500) as f64,
        }
        .quantile(0.975)
    });
    let beta_q = |i: usize| beta(i).quantile(0.05);
    let gamma_e = |i: usize| {
        Marginal::Gamma {
            shape: 0.5 + (i % 301) as f64,
            rate: 1.0,
        }
        .quantile(0.95)
    };
    let t_e = |i: usize| {
        Marginal::StudentT {
            loc: 0.0,
            scale: 1.0,
            dof: 3.0 + (i % 500) as f64,
        }
        .quantile(0.975)
    };
    let m = 10_000;
    println!("\n| family reader (one core) | million per second | tail evaluations each |");
    println!("|---|---|---|");
    println!("| Beta mean + variance | {:.1} | - |", mean / 1e6);
    println!(
        "| Beta quantile (a 0.5-96.5, b 10.5-1022.5, q 0.05) | {:.2} | {:.2} |",
        quantile / 1e6,
        evaluations(&beta_q, m)
    );
    println!(
        "| Gamma quantile (shape 0.5-300.5, q 0.95) | {:.2} | {:.2} |",
        gamma_q / 1e6,
        evaluations(&gamma_e, m)
    );
    println!(
        "| Student-t quantile (dof 3-502, q 0.975) | {:.2} | {:.2} |",
        t_q / 1e6,
        evaluations(&t_e, m)
    );
}
