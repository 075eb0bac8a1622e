//! Benchmarks: posterity's aggregates and readers against the engine's own
//! COUNT/SUM group-by on the same data, in one run, as ratios.
//!
//! cargo bench --bench fit -- [ROWS] [LEVELS]     (defaults: 10000000 30000)

use std::sync::Arc;
use std::time::Instant;

use datafusion::arrow::array::{ArrayRef, Float64Array, Int64Array, RecordBatch, StringArray};
use datafusion::arrow::datatypes::{DataType, Field, Schema};
use datafusion::datasource::MemTable;
use datafusion::prelude::{SessionConfig, SessionContext};
use posterity::family::rng::{mix64, uniform};
use posterity::family::Marginal;

/// Zipf(1.1)-distributed keys, a 0/1 target and a continuous target.
fn table(rows: usize, levels: usize, partitions: usize) -> MemTable {
    let mut cumulative = Vec::with_capacity(levels);
    let mut acc = 0.0;
    for r in 1..=levels {
        acc += 1.0 / (r as f64).powf(1.1);
        cumulative.push(acc);
    }
    let names: Vec<String> = (0..levels).map(|i| format!("level_{i:06}")).collect();
    let schema = Arc::new(Schema::new(vec![
        Field::new("key", DataType::Utf8, false),
        Field::new("y", DataType::Int64, false),
        Field::new("x", DataType::Float64, false),
    ]));
    let mut state = 17u64;
    let per = rows / partitions;
    let mut parts = Vec::new();
    for _ in 0..partitions {
        let mut batches = Vec::new();
        let mut left = per;
        while left > 0 {
            let n = left.min(65_536);
            left -= n;
            let mut keys = Vec::with_capacity(n);
            let mut ys = Vec::with_capacity(n);
            let mut xs = Vec::with_capacity(n);
            for _ in 0..n {
                state = mix64(state);
                let u = uniform(state, &[]) * acc;
                let k = cumulative.partition_point(|c| *c < u).min(levels - 1);
                keys.push(names[k].as_str());
                state = mix64(state);
                let v = uniform(state, &[]);
                ys.push(i64::from(v < 0.05 + 0.1 * (k % 7) as f64 / 7.0));
                xs.push(100.0 + 10.0 * v + (k % 13) as f64);
            }
            let columns: Vec<ArrayRef> = vec![
                Arc::new(StringArray::from(keys)),
                Arc::new(Int64Array::from(ys)),
                Arc::new(Float64Array::from(xs)),
            ];
            batches.push(RecordBatch::try_new(schema.clone(), columns).unwrap());
        }
        parts.push(batches);
    }
    MemTable::try_new(schema, parts).unwrap()
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

#[tokio::main]
async fn main() {
    let args: Vec<String> = std::env::args().filter(|a| !a.starts_with("--")).collect();
    let rows: usize = args
        .get(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(10_000_000);
    let levels: usize = args.get(2).and_then(|a| a.parse().ok()).unwrap_or(30_000);
    let partitions = std::thread::available_parallelism().map_or(2, |n| n.get());
    let ctx =
        SessionContext::new_with_config(SessionConfig::new().with_target_partitions(partitions));
    posterity::register(&ctx);
    ctx.register_table("t", Arc::new(table(rows, levels, partitions)))
        .unwrap();
    ctx.sql("CREATE TABLE enc AS SELECT key, beta_posterior(y) AS p, COUNT(*) AS n, SUM(y) AS s FROM t GROUP BY key")
        .await
        .unwrap()
        .collect()
        .await
        .unwrap();
    println!("rows {rows}, levels {levels}, partitions {partitions}; median of 5 runs\n");
    let baseline =
        median_seconds(&ctx, "SELECT key, COUNT(*), SUM(y) FROM t GROUP BY key", 5).await;
    let cases = [
        (
            "fit: beta_posterior(y) GROUP BY key",
            "SELECT key, beta_posterior(y) FROM t GROUP BY key",
        ),
        (
            "fit: nig_posterior(x) GROUP BY key",
            "SELECT key, nig_posterior(x) FROM t GROUP BY key",
        ),
        (
            "engine: COUNT(*), SUM(x), SUM(x*x) GROUP BY key",
            "SELECT key, COUNT(*), SUM(x), SUM(x * x) FROM t GROUP BY key",
        ),
        (
            "join back + mean (engine, t LEFT JOIN enc)",
            "SELECT SUM((e.s + 0.5) / (e.n + 1.0)) FROM t LEFT JOIN enc e USING (key)",
        ),
        (
            "join back + posterior_mean (t LEFT JOIN enc)",
            "SELECT SUM(posterior_mean(e.p)) FROM t LEFT JOIN enc e USING (key)",
        ),
        (
            "join back + posterior_mean (enc RIGHT JOIN t)",
            "SELECT SUM(posterior_mean(e.p)) FROM enc e RIGHT JOIN t USING (key)",
        ),
        (
            "readers: quantile(0.05) over the encoding table",
            "SELECT SUM(posterior_quantile(p, 0.05)) FROM enc",
        ),
    ];
    println!("| query | seconds | ratio to COUNT/SUM group-by |");
    println!("|---|---|---|");
    println!("| engine: COUNT(*), SUM(y) GROUP BY key | {baseline:.3} | 1.00 |");
    for (name, sql) in cases {
        let t = median_seconds(&ctx, sql, 5).await;
        println!("| {name} | {t:.3} | {:.2} |", t / baseline);
    }

    let n = 2_000_000;
    let beta = |i: usize| Marginal::Beta {
        a: 0.5 + (i % 97) as f64,
        b: 10.5 + (i % 1013) as f64,
    };
    let mean = per_second(n, |i| beta(i).mean() + beta(i).var());
    let quantile = per_second(n / 10, |i| beta(i).quantile(0.05));
    let gamma_q = per_second(n / 10, |i| {
        Marginal::Gamma {
            shape: 0.5 + (i % 301) as f64,
            rate: 1.0,
        }
        .quantile(0.95)
    });
    let t_q = per_second(n / 10, |i| {
        Marginal::StudentT {
            loc: 0.0,
            scale: 1.0,
            dof: 3.0 + (i % 500) as f64,
        }
        .quantile(0.975)
    });
    println!("\n| family reader (one core) | per second |");
    println!("|---|---|");
    println!("| Beta mean + variance | {:.1} M |", mean / 1e6);
    println!(
        "| Beta quantile (a 0.5-96.5, b 10.5-1022.5, q 0.05) | {:.2} M |",
        quantile / 1e6
    );
    println!(
        "| Gamma quantile (shape 0.5-300.5, q 0.95) | {:.2} M |",
        gamma_q / 1e6
    );
    println!(
        "| Student-t quantile (dof 3-502, q 0.975) | {:.2} M |",
        t_q / 1e6
    );
}
