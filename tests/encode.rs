//! `posterity encode` end to end: leakage, agreement with plain COUNT/SUM SQL,
//! the JSON bundle against the SQL path, and determinism.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use datafusion::arrow::array::{Array, AsArray};
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Float64Type, Int64Type};
use datafusion::prelude::{ParquetReadOptions, SessionContext};
use posterity::bundle::Bundle;
use posterity::family::rng::{mix64, uniform};

fn temp_dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("posterity-encode-{name}-{}", std::process::id()));
    std::fs::remove_dir_all(&d).ok();
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn encode(args: &[&str]) {
    let o = Command::new(env!("CARGO_BIN_EXE_posterity"))
        .arg("encode")
        .args(args)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

/// A CSV with a random key of `levels` levels, a time column, and a target
/// independent of the key (probability 0.3).
fn random_key_csv(dir: &Path, rows: usize, levels: u64) -> String {
    let mut s = String::from("id,key,t,y\n");
    let mut state = 5u64;
    for id in 0..rows {
        state = mix64(state);
        let key = state % levels;
        state = mix64(state);
        let y = u8::from(uniform(state, &[]) < 0.3);
        s.push_str(&format!("{id},k{key},{},{y}\n", id / 7));
    }
    let path = dir.join("train.csv");
    std::fs::write(&path, s).unwrap();
    path.display().to_string()
}

/// Column `name` of a Parquet file as f64, in file order.
async fn column(path: &Path, name: &str) -> Vec<f64> {
    let ctx = SessionContext::new();
    let df = ctx
        .read_parquet(path.to_str().unwrap(), ParquetReadOptions::default())
        .await
        .unwrap();
    let batches = df.select_columns(&[name]).unwrap().collect().await.unwrap();
    let mut out = Vec::new();
    for b in batches {
        let c = cast(b.column(0), &DataType::Float64).unwrap();
        let c = c.as_primitive::<Float64Type>();
        out.extend((0..c.len()).map(|i| c.value(i)));
    }
    out
}

fn corr(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len() as f64;
    let (mx, my) = (x.iter().sum::<f64>() / n, y.iter().sum::<f64>() / n);
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        sxy += (a - mx) * (b - my);
        sxx += (a - mx) * (a - mx);
        syy += (b - my) * (b - my);
    }
    sxy / (sxx * syy).sqrt()
}

// Target leakage, a fact of the trade (common practice, no source): with a target
// independent of a 10,000-level key, in-sample encodings correlate with the
// training target; out-of-fold, leave-one-out and as-of encodings do not.
#[tokio::test]
async fn leakage_on_a_random_key() {
    let dir = temp_dir("leak");
    let train = random_key_csv(&dir, 200_000, 10_000);
    let mut results = HashMap::new();
    for method in ["kfold", "loo", "time"] {
        let out = dir.join(method);
        let mut args = vec![
            "--train",
            &train,
            "--target",
            "y",
            "--columns",
            "key",
            "--prior",
            "1,1",
            "--readers",
            "mean",
            "--method",
            method,
        ];
        let out_s = out.display().to_string();
        args.extend(["--out", &out_s]);
        if method == "time" {
            args.extend(["--time-column", "t"]);
        }
        encode(&args);
        let enc = column(&out.join("train_encoded.parquet"), "key_mean").await;
        let y = column(&out.join("train_encoded.parquet"), "y").await;
        results.insert(method, corr(&enc, &y));
    }
    // In-sample: the full-data encoding table joined back to the training rows.
    let ctx = SessionContext::new();
    posterity::register(&ctx);
    ctx.register_csv("train", &train, Default::default())
        .await
        .unwrap();
    let b = ctx
        .sql("SELECT corr(posterior_mean(e.p), t.y) FROM train t JOIN (SELECT key, beta_posterior(y, beta_prior(1, 1)) AS p FROM train GROUP BY key) e USING (key)")
        .await
        .unwrap()
        .collect()
        .await
        .unwrap();
    let in_sample = b[0].column(0).as_primitive::<Float64Type>().value(0);
    eprintln!("in-sample r = {in_sample:.4}, out-of-fold r = {:.4}, leave-one-out r = {:.4}, as-of r = {:.4}", results["kfold"], results["loo"], results["time"]);
    assert!(in_sample > 0.15, "in-sample r = {in_sample}");
    assert!(
        results["kfold"].abs() < 0.02,
        "out-of-fold r = {}",
        results["kfold"]
    );
    assert!(
        results["time"].abs() < 0.02,
        "as-of r = {}",
        results["time"]
    );
    assert!(
        results["loo"].abs() < 0.02,
        "leave-one-out r = {}",
        results["loo"]
    );
}

// Every output value equals an independent computation from plain COUNT/SUM SQL:
// out-of-fold mean = (1 + s_total - s_fold) / (2 + n_total - n_fold) under Beta(1, 1).
#[tokio::test]
async fn values_match_count_and_sum() {
    let dir = temp_dir("values");
    let train = format!(
        "{}/demo/sample/appointments.csv",
        env!("CARGO_MANIFEST_DIR")
    );
    let out = dir.join("out");
    encode(&[
        "--train",
        &train,
        "--target",
        "no_show",
        "--columns",
        "breed",
        "--prior",
        "1,1",
        "--readers",
        "mean",
        "--seed",
        "3",
        "--out",
        out.to_str().unwrap(),
    ]);
    let ctx = SessionContext::new();
    posterity::register(&ctx);
    ctx.register_csv("a", &train, Default::default())
        .await
        .unwrap();
    ctx.register_parquet(
        "enc",
        out.join("train_encoded.parquet").to_str().unwrap(),
        ParquetReadOptions::default(),
    )
    .await
    .unwrap();
    // Row numbers in file order: appointment_id is 0..n in the sample, so __row = appointment_id.
    let sql = "WITH f AS (SELECT *, fold_of(appointment_id, 5, 3) AS fold FROM a),
        tot AS (SELECT breed, SUM(no_show) AS s, COUNT(*) AS n FROM f GROUP BY breed),
        fo AS (SELECT breed, fold, SUM(no_show) AS s, COUNT(*) AS n FROM f GROUP BY breed, fold)
        SELECT MAX(ABS(e.breed_mean - (1.0 + tot.s - fo.s) / (2.0 + tot.n - fo.n))), COUNT(*)
        FROM f JOIN tot USING (breed) JOIN fo ON fo.breed = f.breed AND fo.fold = f.fold
        JOIN enc e ON e.appointment_id = f.appointment_id";
    let b = ctx.sql(sql).await.unwrap().collect().await.unwrap();
    let worst = b[0].column(0).as_primitive::<Float64Type>().value(0);
    let n = b[0].column(1).as_primitive::<Int64Type>().value(0);
    assert_eq!(n, 3000);
    assert!(worst < 1e-12, "worst difference {worst}");
}

// The JSON bundle scores a table to the same values as the SQL path, and the
// outputs are byte-identical across runs and thread counts.
#[tokio::test]
async fn bundle_matches_sql_and_outputs_are_deterministic() {
    let dir = temp_dir("bundle");
    let train = format!(
        "{}/demo/sample/appointments.csv",
        env!("CARGO_MANIFEST_DIR")
    );
    let (a, b) = (dir.join("a"), dir.join("b"));
    for (out, threads) in [(&a, "1"), (&b, "4")] {
        let o = Command::new(env!("CARGO_BIN_EXE_posterity"))
            .args([
                "--threads",
                threads,
                "encode",
                "--train",
                &train,
                "--target",
                "no_show",
                "--columns",
                "breed,postcode_area",
            ])
            .args([
                "--interactions",
                "breed:clinic",
                "--readers",
                "mean,sd,q05",
                "--score",
                &train,
                "--out",
                out.to_str().unwrap(),
            ])
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    }
    for file in [
        "train_encoded.parquet",
        "scored.parquet",
        "bundle.json",
        "encodings/breed.parquet",
        "unseen_levels.json",
    ] {
        assert_eq!(
            std::fs::read(a.join(file)).unwrap(),
            std::fs::read(b.join(file)).unwrap(),
            "{file} differs"
        );
    }
    let bundle =
        Bundle::from_json(&std::fs::read_to_string(a.join("bundle.json")).unwrap()).unwrap();
    let ctx = SessionContext::new();
    let df = ctx
        .read_parquet(
            a.join("scored.parquet").to_str().unwrap(),
            ParquetReadOptions::default(),
        )
        .await
        .unwrap();
    let batches = df
        .select_columns(&["postcode_area", "postcode_area_mean", "postcode_area_q05"])
        .unwrap()
        .collect()
        .await
        .unwrap();
    let enc = &bundle.columns["postcode_area"];
    let mut checked = 0;
    for batch in batches {
        let keys = batch
            .column(0)
            .as_string_view_opt()
            .map(|_| cast(batch.column(0), &DataType::Utf8).unwrap())
            .unwrap_or_else(|| batch.column(0).clone());
        let keys = keys.as_string::<i32>();
        let means = batch.column(1).as_primitive::<Float64Type>();
        let q05 = batch.column(2).as_primitive::<Float64Type>();
        for i in 0..batch.num_rows() {
            let m = enc
                .lookup(keys.is_valid(i).then(|| keys.value(i)))
                .marginal(None)
                .unwrap();
            assert!((m.mean() - means.value(i)).abs() <= 1e-15, "row {i}");
            assert!((m.quantile(0.05) - q05.value(i)).abs() <= 1e-15);
            checked += 1;
        }
    }
    assert_eq!(checked, 3000);
    // An unseen level gets the prior.
    assert_eq!(enc.lookup(Some("no-such-area")), &enc.prior);
}
