//! `posterity encode` end to end: leakage, agreement with plain COUNT/SUM SQL,
//! the JSON bundle against the SQL path, and determinism.

use std::collections::HashMap;
use std::path::Path;
use std::process::Command;

use datafusion::arrow::array::{Array, AsArray};
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Float64Type, Int64Type};
use datafusion::prelude::{ParquetReadOptions, SessionContext};
use posterity::bundle::Bundle;
use posterity::family::rng::{mix64, uniform};

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

/// The serving bundle an encode run wrote into `out`.
fn bundle_in(out: &Path) -> Bundle {
    Bundle::from_json(&std::fs::read_to_string(out.join("bundle.json")).unwrap()).unwrap()
}

/// A Parquet file's rows as one batch.
async fn rows_of(path: &Path) -> datafusion::arrow::array::RecordBatch {
    let ctx = SessionContext::new();
    let batches = ctx
        .read_parquet(path.to_str().unwrap(), ParquetReadOptions::default())
        .await
        .unwrap()
        .collect()
        .await
        .unwrap();
    datafusion::arrow::compute::concat_batches(&batches[0].schema(), &batches).unwrap()
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
        out.extend((0..c.len()).map(|i| {
            assert!(
                c.is_valid(i),
                "{name}: NULL at row {i} of {}",
                path.display()
            );
            c.value(i)
        }));
    }
    out
}

/// The largest absolute difference between two columns of the same rows.
fn largest_difference(a: &[f64], b: &[f64]) -> f64 {
    assert_eq!(a.len(), b.len(), "the columns have different lengths");
    a.iter()
        .zip(b)
        .map(|(x, y)| (x - y).abs())
        .fold(0.0, f64::max)
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
    let dir = scratch!("leak");
    let train = random_key_csv(&dir, 200_000, 10_000);
    let mut results = HashMap::new();
    for method in ["kfold", "time"] {
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
    eprintln!(
        "in-sample r = {in_sample:.4}, out-of-fold r = {:.4}, as-of r = {:.4}",
        results["kfold"], results["time"]
    );
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
    // Leave-one-out is refused: its values reveal each row's own target to trees.
    let o = encode_output(&[
        "encode",
        "--train",
        &train,
        "--target",
        "y",
        "--columns",
        "key",
        "--method",
        "loo",
        "--out",
        dir.join("loo").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--method loo is not offered"));
}

// Every output value equals an independent computation from plain COUNT/SUM SQL:
// out-of-fold mean = (1 + s_total - s_fold) / (2 + n_total - n_fold) under Beta(1, 1).
#[tokio::test]
async fn values_match_count_and_sum() {
    let dir = scratch!("values");
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
    let ctx = rows_and_encodings(&train, &out.join("train_encoded.parquet")).await;
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
    let dir = scratch!("bundle");
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
    let bundle = bundle_in(&a);
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
                .scoring(keys.is_valid(i).then(|| keys.value(i)))
                .unwrap()
                .marginal(None)
                .unwrap();
            assert!((m.mean() - means.value(i)).abs() <= 1e-15, "row {i}");
            assert!((m.quantile(0.05) - q05.value(i)).abs() <= 1e-15);
            checked += 1;
        }
    }
    assert_eq!(checked, 3000);
    // Five folds: scored rows read 4/5 of each level's data, as out-of-fold rows do.
    assert_eq!(enc.score_scale, 0.8);
    // An unseen level gets the prior.
    assert_eq!(enc.lookup(Some("no-such-area")), &enc.prior);
    assert_eq!(enc.scoring(Some("no-such-area")).unwrap(), enc.prior);
}

fn encode_output(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_posterity"))
        .args(args)
        .output()
        .unwrap()
}

/// The message of an encode run with `args` that must be refused as a usage error.
fn encode_refusal(args: &[&str]) -> String {
    let o = encode_output(&[&["encode"], args].concat());
    let stderr = String::from_utf8_lossy(&o.stderr).into_owned();
    assert_eq!(o.status.code(), Some(2), "{args:?}: {stderr}");
    stderr
}

/// The rows of `select` over the sample (table `a`) written to the Parquet `file`.
async fn sample_to_parquet(select: &str, file: &Path) {
    let ctx = SessionContext::new();
    ctx.register_csv("a", &sample(), Default::default())
        .await
        .unwrap();
    let copy = format!("COPY ({select}) TO '{}' STORED AS PARQUET", file.display());
    ctx.sql(&copy).await.unwrap().collect().await.unwrap();
}

/// Text column `name` of a Parquet file, in file order.
async fn texts(path: &Path, name: &str) -> Vec<Option<String>> {
    let ctx = SessionContext::new();
    let df = ctx
        .read_parquet(path.to_str().unwrap(), ParquetReadOptions::default())
        .await
        .unwrap();
    let mut out = Vec::new();
    for b in df.select_columns(&[name]).unwrap().collect().await.unwrap() {
        let c = cast(b.column(0), &DataType::Utf8).unwrap();
        let c = c.as_string::<i32>();
        out.extend((0..c.len()).map(|i| c.is_valid(i).then(|| c.value(i).to_string())));
    }
    out
}

// Keys keep the text they were written with (a CSV code 00123 is not the number
// 123), and interaction keys of parts containing the separator do not collide.
#[tokio::test]
async fn keys_stay_as_written_and_interactions_do_not_collide() {
    let dir = scratch!("keys");
    let train = dir.join("train.csv");
    std::fs::write(
        &train,
        "code,a,b,y\n00123,x|y,z,1\n123,x,y|z,0\n0042,x|y,z,1\n00123,x,y|z,0\n",
    )
    .unwrap();
    let out = dir.join("out");
    encode(&[
        "--train",
        train.to_str().unwrap(),
        "--target",
        "y",
        "--columns",
        "code",
        "--interactions",
        "a:b",
        "--prior",
        "1,1",
        "--readers",
        "mean",
        "--out",
        out.to_str().unwrap(),
    ]);
    let bundle = bundle_in(&out);
    let code = &bundle.columns["code"];
    let levels: Vec<&str> = code.levels.keys().map(String::as_str).collect();
    assert_eq!(levels, ["00123", "0042", "123"]);
    assert_eq!(code.key_columns, ["code"]);
    let pair = &bundle.columns["a_x_b"];
    assert_eq!(pair.key_columns, ["a", "b"]);
    // ("x|y", "z") and ("x", "y|z") joined with a bare '|' were one level.
    assert_eq!(pair.levels.len(), 2);
    let level = pair.level_of(&[Some("x|y"), Some("z")]).unwrap();
    assert_eq!(level, "3:x|y|1:z");
    let p = &pair.levels[&level];
    assert_eq!(p.evidence(), 2.0);
    assert_eq!(pair.level_of(&[Some("x"), None]), None);
    // The training file keeps the codes as text.
    let written = texts(&out.join("train_encoded.parquet"), "code").await;
    assert_eq!(written[0].as_deref(), Some("00123"));
    assert_eq!(written[2].as_deref(), Some("0042"));
    // The shell reads such columns as text with --csv-text.
    let o = encode_output(&[
        "--csv-text",
        "code",
        "--format",
        "csv",
        "-t",
        &format!("t={}", train.display()),
        "-c",
        "SELECT code FROM t ORDER BY code LIMIT 1",
    ]);
    assert_eq!(String::from_utf8_lossy(&o.stdout), "code\n00123\n");
}

// A key that is (or contains) the target is the row's own outcome: a perfect leak
// that must be refused, as must ordering as-of encodings by the target.
#[test]
fn leaky_keys_are_refused() {
    let dir = scratch!("leaky");
    let train = random_key_csv(&dir, 100, 5);
    let out = dir.join("out").display().to_string();
    let cases: [(&[&str], &str); 4] = [
        (
            &["--columns", "y"],
            "--columns includes the target 'y': its encoding would be the row's own outcome (a perfect leak); encode other columns",
        ),
        (
            &["--columns", "key", "--interactions", "key:y"],
            "the interaction 'key:y' includes the target 'y'",
        ),
        (
            &["--columns", "key", "--time-column", "y"],
            "--time-column 'y' is the target: ordering rows by their own outcome leaks it",
        ),
        (
            &["--columns", "key,t", "--time-column", "t"],
            "--time-column 't' is also encoded as a key",
        ),
    ];
    for (extra, message) in cases {
        let mut args = vec!["encode", "--train", &train, "--target", "y", "--out", &out];
        args.extend(extra);
        let o = encode_output(&args);
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{args:?}: {stderr}");
        assert!(stderr.contains(message), "{args:?}: {stderr}");
        assert!(!dir.join("out").join("bundle.json").exists());
    }
}

// An input column named like one of encode's working columns is refused in words
// before any statement runs (a training column `__fold`, from a user's own folds,
// once failed with "Schema contains qualified field name t.__fold ..."); other
// double-underscore names, such as a pandas index, pass through.
#[test]
fn input_columns_named_like_working_columns_are_refused() {
    let dir = scratch!("working-names");
    let out = dir.join("out").display().to_string();
    let write = |name: &str, text: &str| {
        let path = dir.join(name);
        std::fs::write(&path, text).unwrap();
        path.display().to_string()
    };
    let rows: String = (0..60)
        .map(|i| format!("k{},{},{},{}\n", i % 6, i % 2, i / 6, i % 5))
        .collect();
    for (column, time) in [("__fold", false), ("__row", true), ("__k0", true)] {
        let train = write("train.csv", &format!("key,y,t,{column}\n{rows}"));
        let mut args = vec![
            "--train",
            &train,
            "--target",
            "y",
            "--columns",
            "key",
            "--out",
            &out,
        ];
        if time {
            args.extend(["--time-column", "t", "--half-life", "fitted"]);
        }
        let stderr = encode_refusal(&args);
        assert!(
            stderr.contains(&format!(
                "the training column '{column}' has a name encode keeps for its working columns"
            )),
            "{stderr}"
        );
    }
    let train = write("train.csv", &format!("key,y,t,__index_level_0__\n{rows}"));
    let score = write("score.csv", "key,__time\nk1,3\n");
    let args = [
        "--train",
        &train,
        "--target",
        "y",
        "--columns",
        "key",
        "--out",
        &out,
    ];
    let stderr = encode_refusal(&[&args[..], &["--score", &score]].concat());
    assert!(
        stderr.contains("the scored column '__time' has a name encode keeps"),
        "{stderr}"
    );
    let o = encode_output(&[&["encode"], &args[..]].concat());
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

// A CSV written with another delimiter reads as one column named by the whole
// header: the refusal says which delimiter the header seems to use.
#[test]
fn a_csv_with_another_delimiter_is_named() {
    let dir = scratch!("delimiter");
    let out = dir.join("out").display().to_string();
    for (text, shown) in [
        ("breed;no_show\nbeagle;1\n", "';'"),
        ("breed\tno_show\nbeagle\t1\n", "tabs"),
    ] {
        let path = dir.join("train.csv");
        std::fs::write(&path, text).unwrap();
        let train = path.display().to_string();
        let stderr = encode_refusal(&[
            "--train",
            &train,
            "--target",
            "no_show",
            "--columns",
            "breed",
            "--out",
            &out,
        ]);
        assert!(
            stderr.contains(&format!("its header looks separated by {shown}")),
            "{stderr}"
        );
    }
}

// As-of encodings see strictly earlier times only: rows at one time share an
// encoding, and a level's first time gets the prior. Checked against a direct
// count over the CSV (Beta(2, 18): mean = (2 + s) / (20 + n)).
#[tokio::test]
async fn as_of_encodings_see_only_earlier_times() {
    let dir = scratch!("asof");
    let train = random_key_csv(&dir, 5_000, 40);
    let out = dir.join("strict");
    let run = |out: &Path, ties: &str| {
        encode(&[
            "--train",
            &train,
            "--target",
            "y",
            "--columns",
            "key",
            "--time-column",
            "t",
            "--time-ties",
            ties,
            "--prior",
            "2,18",
            "--readers",
            "mean",
            "--out",
            out.to_str().unwrap(),
        ])
    };
    run(&out, "strict");
    let means = column(&out.join("train_encoded.parquet"), "key_mean").await;
    let text = std::fs::read_to_string(&train).unwrap();
    let rows: Vec<(String, i64, f64)> = text
        .lines()
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (
                f[1].to_string(),
                f[2].parse().unwrap(),
                f[3].parse().unwrap(),
            )
        })
        .collect();
    let mut first_rows = 0;
    for (i, (key, t, _)) in rows.iter().enumerate() {
        let (s, n) = rows
            .iter()
            .filter(|(k, u, _)| k == key && u < t)
            .fold((0.0, 0.0), |(s, n), (_, _, y)| (s + y, n + 1.0));
        first_rows += usize::from(n == 0.0);
        let want = (2.0 + s) / (20.0 + n);
        assert!(
            (means[i] - want).abs() < 1e-15,
            "row {i}: {} vs {want}",
            means[i]
        );
    }
    assert!(first_rows >= 40, "every level has a first time");
    // The file-order option lets same-time rows see each other: it differs.
    let loose = dir.join("file_order");
    run(&loose, "file-order");
    let loose_means = column(&loose.join("train_encoded.parquet"), "key_mean").await;
    assert_ne!(loose_means, means);
}

// As-of encodings for every family with a chosen prior: a level's first rows get
// exactly that prior (they got the default prior before), and class targets work.
#[tokio::test]
async fn as_of_first_rows_get_the_chosen_prior_in_every_family() {
    let dir = scratch!("asof-families");
    let mut csv = String::from("key,t,y,amount,visits,outcome\n");
    for i in 0..60 {
        let outcome = ["attended", "no_show", "late_cancel"][i % 3];
        csv.push_str(&format!(
            "k{},{},{},{},{},{outcome}\n",
            i % 4,
            i / 4,
            i % 2,
            20.0 + (i as f64) * 0.75,
            i % 5
        ));
    }
    let train = dir.join("train.csv");
    std::fs::write(&train, csv).unwrap();
    // (target, family, prior, prior mean of the first reader column)
    let cases = [
        ("y", "beta", "2,18", "key_mean", 0.1),
        ("visits", "gamma", "3,2", "key_mean", 1.5),
        ("amount", "nig", "40,1,3,10", "key_mean", 40.0),
        ("outcome", "dirichlet", "2", "key_attended_mean", 1.0 / 3.0),
    ];
    for (target, family, prior, reader, want) in cases {
        let out = dir.join(family);
        encode(&[
            "--train",
            train.to_str().unwrap(),
            "--target",
            target,
            "--family",
            family,
            "--columns",
            "key",
            "--time-column",
            "t",
            "--prior",
            prior,
            "--readers",
            "mean",
            "--out",
            out.to_str().unwrap(),
        ]);
        let got = column(&out.join("train_encoded.parquet"), reader).await;
        // Rows 0..3 are each level's only rows at the first time.
        for (i, g) in got.iter().take(4).enumerate() {
            assert!((g - want).abs() < 1e-12, "{family} row {i}: {g} vs {want}");
        }
        assert!(got[4..].iter().any(|g| (g - want).abs() > 1e-6), "{family}");
    }
}

// Continuous and fractional targets give identical bytes whatever the thread count
// and on repeated runs (the fit statistics are compensated sums).
#[test]
fn float_targets_give_identical_bytes_at_any_thread_count() {
    let dir = scratch!("float-determinism");
    let mut csv = String::from("key,amount,events,exposure\n");
    let mut state = 11u64;
    for _ in 0..60_000 {
        state = mix64(state);
        let key = state % 300;
        let u = uniform(state, &[1.0]);
        let v = uniform(state, &[2.0]);
        csv.push_str(&format!(
            "k{key},{},{},{}\n",
            1000.0 + 250.0 * (u - 0.5) / (v + 0.01),
            (u * 7.0).floor(),
            0.1 + v * 3.3
        ));
    }
    let train = dir.join("train.csv");
    std::fs::write(&train, csv).unwrap();
    let run = |name: &str, threads: &str, target: &[&str]| {
        let out = dir.join(name);
        let mut args = vec![
            "--threads",
            threads,
            "encode",
            "--train",
            train.to_str().unwrap(),
            "--columns",
            "key",
            "--readers",
            "mean,sd",
        ];
        args.extend(target);
        let out_s = out.display().to_string();
        args.extend(["--out", &out_s]);
        let o = encode_output(&args);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        out
    };
    let targets: [&[&str]; 2] = [
        &["--target", "amount"],
        &["--target", "events", "--exposure", "exposure"],
    ];
    for (t, target) in targets.iter().enumerate() {
        let reference = run(&format!("{t}-1"), "1", target);
        for (name, threads) in [("2", "2"), ("8", "8"), ("8-again", "8")] {
            let other = run(&format!("{t}-{name}"), threads, target);
            for file in [
                "train_encoded.parquet",
                "bundle.json",
                "encodings/key.parquet",
            ] {
                assert_eq!(
                    std::fs::read(reference.join(file)).unwrap(),
                    std::fs::read(other.join(file)).unwrap(),
                    "{target:?}: {file} differs between 1 and {threads} threads"
                );
            }
        }
    }
}

fn sample() -> String {
    format!(
        "{}/demo/sample/appointments.csv",
        env!("CARGO_MANIFEST_DIR")
    )
}

/// A plan for the snapshot, built by hand so that nothing runs.
fn snapshot_plan() -> posterity::encode::EncodePlan {
    use posterity::encode::{EncodeOptions, EncodePlan, KeyPlan, Method, Reader, Treatment};
    use posterity::layout::Kind;
    let mut options = EncodeOptions::new("train", "{class}", &[]);
    options.readers = Some(vec![Reader::Mean, Reader::Quantile(0.05)]);
    options.score = Some("score".into());
    let key = |name: &str, columns: &[&str], treatment: Treatment, indicators: usize| {
        let mut key = KeyPlan::posterior(
            name.into(),
            columns.iter().map(|c| c.to_string()).collect(),
            &options,
        );
        key.treatment = treatment;
        key.indicators = indicators;
        key
    };
    let keys = vec![
        key("a_b", &["a\"b"], Treatment::Posterior, 20),
        key(
            "naïve_café_x__y_",
            &["naïve café", "{y}"],
            Treatment::Codes,
            0,
        ),
        key("_y_", &["{y}"], Treatment::Levels, 3),
    ];
    EncodePlan {
        options,
        family: Kind::Dirichlet,
        method: Method::Kfold,
        score_scale: 0.8,
        time_units: Default::default(),
        classes: vec![
            "{y}".into(),
            "a\"b".into(),
            "naïve café".into(),
            "it's".into(),
        ],
        base_prior: "dirichlet_prior(['{y}', 'a\"b', 'naïve café', 'it''s'], 0.5)".into(),
        fitted: true,
        keys,
        train_columns: vec![
            "a\"b".into(),
            "naïve café".into(),
            "{y}".into(),
            "{class}".into(),
        ],
        score_columns: vec!["a\"b".into(), "naïve café".into(), "{y}".into()],
        newest_time: None,
        oldest_time: None,
    }
}

// The statements of a plan, without running them, against a committed snapshot
// (regenerate with POSTERITY_BLESS=1 after a deliberate change and read the diff).
#[test]
fn statements_match_the_snapshot() {
    let text: String = snapshot_plan()
        .statements()
        .iter()
        .map(|s| {
            format!(
                "-- {} ({})\n{};\n\n",
                s.name,
                s.output.as_deref().unwrap_or("table"),
                s.sql
            )
        })
        .collect();
    let path = format!(
        "{}/tests/data/encode_statements.sql",
        env!("CARGO_MANIFEST_DIR")
    );
    if std::env::var_os("POSTERITY_BLESS").is_some() {
        std::fs::write(&path, &text).unwrap();
    }
    let want = std::fs::read_to_string(&path).unwrap_or_default();
    assert!(
        text == want,
        "statements differ from {path}; rerun with POSTERITY_BLESS=1 and review the diff"
    );
}

// Names that look like template placeholders, quotes, and non-ASCII text in
// columns, classes and levels are only ever data.
#[tokio::test]
async fn names_from_the_data_are_never_templates() {
    let dir = scratch!("names");
    let train = dir.join("train.csv");
    let mut csv = String::from("\"a\"\"b\",naïve café,{y},{class}\n");
    for i in 0..60 {
        let class = ["{y}", "it's", "naïve café"][i % 3];
        csv.push_str(&format!(
            "k{},\"v{{p}}{}\",{},{class}\n",
            i % 4,
            i % 3,
            i % 2
        ));
    }
    std::fs::write(&train, csv).unwrap();
    let out = dir.join("out");
    encode(&[
        "--train",
        train.to_str().unwrap(),
        "--target",
        "{class}",
        "--columns",
        "a\"b,naïve café",
        "--interactions",
        "naïve café:{y}",
        "--readers",
        "mean,q05",
        "--score",
        train.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    let bundle = bundle_in(&out);
    assert_eq!(bundle.columns.len(), 3);
    let pair = &bundle.columns["naïve_café_x__y_"];
    assert!(
        pair.levels.contains_key("5:v{p}0|1:0"),
        "{:?}",
        pair.levels.keys()
    );
    let means = column(&out.join("train_encoded.parquet"), "a_b_it_s_mean").await;
    assert_eq!(means.len(), 60);
    assert!(means.iter().all(|m| *m > 0.0 && *m < 1.0));
    let scored = column(&out.join("scored.parquet"), "naïve_café_naïve_café_q05").await;
    assert_eq!(scored.len(), 60);
}

// A key named like one of the encodings file's own columns (`p`, `top_rank`,
// `code`, `parent`) encodes like any other; its file names the level column `level`.
#[tokio::test]
async fn keys_named_like_the_encodings_columns() {
    let dir = scratch!("fixed-names");
    let train = dir.join("train.csv");
    let mut csv = String::from("p,top_rank,code,parent,y\n");
    for i in 0..600 {
        csv.push_str(&format!(
            "a{},b{},c{},d{},{}\n",
            i % 7,
            i % 5,
            i % 3,
            i % 4,
            (i * 7 % 10 < 3) as i32
        ));
    }
    std::fs::write(&train, csv).unwrap();
    let out = dir.join("out");
    encode(&[
        "--train",
        train.to_str().unwrap(),
        "--target",
        "y",
        "--columns",
        "p,top_rank,code,parent",
        "--treatment",
        "code=codes",
        "--indicator-min-rows",
        "10",
        "--out",
        out.to_str().unwrap(),
    ]);
    for (key, columns, levels) in [
        ("p", vec!["level", "p", "p_mean", "top_rank"], 7),
        (
            "top_rank",
            vec!["level", "p", "top_rank_mean", "top_rank"],
            5,
        ),
        ("code", vec!["level", "p", "code"], 3),
        ("parent", vec!["level", "p", "parent_mean", "top_rank"], 4),
    ] {
        let path = out.join(format!("encodings/{key}.parquet"));
        let ctx = SessionContext::new();
        let df = ctx
            .read_parquet(path.to_str().unwrap(), ParquetReadOptions::default())
            .await
            .unwrap();
        let names: Vec<String> = df
            .schema()
            .fields()
            .iter()
            .map(|f| f.name().clone())
            .collect();
        assert_eq!(names, columns, "{key}");
        assert_eq!(df.count().await.unwrap(), levels, "{key}");
    }
}

// The README's Rust program: the library runs encode on any session and gives the
// shell's numbers.
#[tokio::test]
async fn library_encode_equals_the_shell() {
    use posterity::encode::{self, EncodeOptions};
    let dir = scratch!("library");
    let ctx = SessionContext::new();
    posterity::register(&ctx);
    ctx.register_csv("appointments", &sample(), Default::default())
        .await
        .unwrap();
    let options = EncodeOptions::new("appointments", "no_show", &["breed", "postcode_area"]);
    let plan = encode::resolve(&ctx, &options).await.unwrap();
    let output = encode::run(&ctx, &plan).await.unwrap();
    let lib_dir = dir.join("lib");
    encode::write(&output, &lib_dir, false).await.unwrap();
    let shell_dir = dir.join("shell");
    encode(&[
        "--train",
        &sample(),
        "--target",
        "no_show",
        "--columns",
        "breed,postcode_area",
        "--out",
        shell_dir.to_str().unwrap(),
    ]);
    for file in ["bundle.json", "encodings/breed.parquet"] {
        assert_eq!(
            std::fs::read(lib_dir.join(file)).unwrap(),
            std::fs::read(shell_dir.join(file)).unwrap(),
            "{file}"
        );
    }
    assert_eq!(
        column(&lib_dir.join("train_encoded.parquet"), "postcode_area_mean").await,
        column(
            &shell_dir.join("train_encoded.parquet"),
            "postcode_area_mean"
        )
        .await
    );
    assert_eq!(output.summary.len(), 2);
    assert_eq!(output.summary[0].levels, 273);
}

/// Split the sample into days before and from `day` (CSV files in `dir`).
fn split_sample(dir: &Path, day: i64) -> (String, String) {
    let text = std::fs::read_to_string(sample()).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap();
    let (mut old, mut new) = (format!("{header}\n"), format!("{header}\n"));
    for l in lines {
        let d: i64 = l.split(',').nth(2).unwrap().parse().unwrap();
        if d < day { &mut old } else { &mut new }.push_str(&format!("{l}\n"));
    }
    let (a, b) = (dir.join("old.csv"), dir.join("new.csv"));
    std::fs::write(&a, old).unwrap();
    std::fs::write(&b, new).unwrap();
    (a.display().to_string(), b.display().to_string())
}
// Every indicator column the outputs carry is in the bundle and marks a level:
// levels are counted by rows, and recency weights (or NULL targets, or exposures)
// make a level's data weight smaller than its rows. A second filter on the weight
// once left such columns all zero and out of the bundle, so scoring with the bundle
// gave other columns than the training table.
#[tokio::test]
async fn every_indicator_column_is_in_the_bundle() {
    let dir = scratch!("indicator-weights");
    let mut s = String::from("clinic,day,no_show\n");
    for i in 0..600u64 {
        let y = if i % 5 == 0 {
            String::new()
        } else {
            (mix64(i) % 2).to_string()
        };
        s.push_str(&format!("c{},{},{y}\n", i % 4, i / 3));
    }
    let train = dir.join("train.csv");
    std::fs::write(&train, s).unwrap();
    for extra in [&["--time-column", "day", "--half-life", "10"][..], &[][..]] {
        let out = dir.join(format!("out{}", extra.len()));
        let mut args = vec!["--train", train.to_str().unwrap(), "--target", "no_show"];
        args.extend(["--columns", "clinic", "--out", out.to_str().unwrap()]);
        args.extend(extra);
        encode(&args);
        let trained = rows_of(&out.join("train_encoded.parquet")).await;
        let schema = trained.schema();
        let tops: Vec<&String> = schema
            .fields()
            .iter()
            .map(|f| f.name())
            .filter(|n| n.contains("_top"))
            .collect();
        assert_eq!(tops.len(), 4, "{extra:?}: each clinic has 150 rows");
        assert_eq!(
            bundle_in(&out).columns["clinic"].indicators.len(),
            4,
            "{extra:?}"
        );
        for top in tops {
            let column = cast(trained.column_by_name(top).unwrap(), &DataType::Int64).unwrap();
            let ones: i64 = column.as_primitive::<Int64Type>().iter().flatten().sum();
            assert_eq!(ones, 150, "{extra:?}: {top}");
        }
    }
}

// A refresh keeps the previous run's indicator columns, each for the same level, so
// that a model trained on the first run's features reads the refreshed ones alike:
// it once re-ranked the levels on the pooled data (new rows that change which
// levels are largest moved `<key>_top1` to another level) and gave 20 indicators to
// a run made with `--indicators 0`.
#[tokio::test]
async fn a_refresh_keeps_each_indicator_on_its_level() {
    let dir = scratch!("update-indicators");
    let write = |name: &str, rows: usize, largest_first: bool, target: bool| {
        let mut s = String::from(if target { "breed,no_show\n" } else { "breed\n" });
        for i in 0..rows {
            // Level b{j} gets j + 1 shares of the rows (or 8 - j when reversed).
            let u = mix64(i as u64 + 7) % 36;
            let mut j = 0;
            while (j + 1) * (j + 2) / 2 <= u as usize {
                j += 1;
            }
            let level = if largest_first { 7 - j } else { j };
            let y = if target {
                format!(",{}", mix64(i as u64) % 2)
            } else {
                String::new()
            };
            s.push_str(&format!("b{level}{y}\n"));
        }
        let path = dir.join(name);
        std::fs::write(&path, s).unwrap();
        path.display().to_string()
    };
    let old = write("old.csv", 800, false, true);
    let new = write("new.csv", 3000, true, true);
    let score = write("score.csv", 50, true, false);
    for indicators in ["3", "0"] {
        let first = dir.join(format!("first{indicators}")).display().to_string();
        let next = dir.join(format!("next{indicators}")).display().to_string();
        encode(&[
            "--train",
            &old,
            "--target",
            "no_show",
            "--columns",
            "breed",
            "--indicators",
            indicators,
            "--out",
            &first,
        ]);
        encode(&[
            "--update", &first, "--train", &new, "--score", &score, "--out", &next,
        ]);
        let stored = bundle_in(Path::new(&first)).columns["breed"]
            .indicators
            .clone();
        assert_eq!(stored.len(), indicators.parse::<usize>().unwrap());
        assert_eq!(
            bundle_in(Path::new(&next)).columns["breed"].indicators,
            stored
        );
        // The scored rows have the first run's encoding columns, top1 on its level.
        let trained = rows_of(&Path::new(&first).join("train_encoded.parquet")).await;
        let scored = rows_of(&Path::new(&next).join("scored.parquet")).await;
        let names = |b: &datafusion::arrow::array::RecordBatch| -> Vec<String> {
            let schema = b.schema();
            schema
                .fields()
                .iter()
                .map(|f| f.name().clone())
                .filter(|n| n != "no_show")
                .collect()
        };
        assert_eq!(names(&scored), names(&trained));
        if let Some(first_level) = stored.first() {
            let breed = cast(scored.column_by_name("breed").unwrap(), &DataType::Utf8).unwrap();
            let top1 = cast(
                scored.column_by_name("breed_top1").unwrap(),
                &DataType::Int64,
            )
            .unwrap();
            let (breed, top1) = (breed.as_string::<i32>(), top1.as_primitive::<Int64Type>());
            for r in 0..scored.num_rows() {
                assert_eq!(top1.value(r) == 1, breed.value(r) == first_level, "row {r}");
            }
        }
    }
}

// A class target's refresh pools under the stored Dirichlet priors, which have no
// room for a class the first run did not see: refused in words before anything
// runs (it failed in the engine with "Execution error: dirichlet_posterior: ...").
#[test]
fn a_refresh_with_a_new_class_is_refused_in_words() {
    let dir = scratch!("update-class");
    let write = |name: &str, classes: &[&str]| {
        let mut s = String::from("clinic,outcome\n");
        for i in 0..90 {
            s.push_str(&format!("c{},{}\n", i % 3, classes[i % classes.len()]));
        }
        let path = dir.join(name);
        std::fs::write(&path, s).unwrap();
        path.display().to_string()
    };
    let old = write("old.csv", &["attended", "no_show", "cancelled"]);
    let new = write("new.csv", &["attended", "rescheduled"]);
    let first = dir.join("first").display().to_string();
    encode(&[
        "--train",
        &old,
        "--target",
        "outcome",
        "--columns",
        "clinic",
        "--out",
        &first,
    ]);
    let out = dir.join("next").display().to_string();
    let stderr = encode_refusal(&["--update", &first, "--train", &new, "--out", &out]);
    assert!(
        stderr.contains("45 new row(s) have a class of 'outcome' the previous run did not have (for example 'rescheduled'; its classes: attended, cancelled, no_show)"),
        "{stderr}"
    );
}

// A count target's refresh reads the new rows' exposures from the column the
// first run read, recorded in the bundle: without it every new row counted as one
// unit of exposure (means off by up to 0.3 on rates near 3), silently.
#[test]
fn a_refresh_reads_exposures_from_the_bundles_column() {
    let dir = scratch!("update-exposure");
    let csv = |name: &str, rows: std::ops::Range<u64>| {
        let mut s = String::from("clinic,visits,years\n");
        for i in rows {
            let years = 0.5 + (mix64(i) % 150) as f64 / 100.0;
            s.push_str(&format!("c{},{},{years}\n", i % 7, mix64(i + 99) % 6));
        }
        let path = dir.join(name);
        std::fs::write(&path, s).unwrap();
        path.display().to_string()
    };
    let (old, new, all) = (
        csv("old.csv", 0..400),
        csv("new.csv", 400..700),
        csv("all.csv", 0..700),
    );
    let out = |name: &str| dir.join(name).display().to_string();
    let common = [
        "--target",
        "visits",
        "--columns",
        "clinic",
        "--prior",
        "3,1",
        "--exposure",
        "years",
    ];
    encode(&[&["--train", &old, "--out", &out("first")], &common[..]].concat());
    encode(&[
        "--update",
        &out("first"),
        "--train",
        &new,
        "--out",
        &out("refreshed"),
    ]);
    encode(&[&["--train", &all, "--out", &out("full")], &common[..]].concat());
    assert_eq!(
        bundle_in(&dir.join("first")).exposure.as_deref(),
        Some("years")
    );
    let refreshed = bundle_in(&dir.join("refreshed"));
    assert_eq!(refreshed.exposure.as_deref(), Some("years"));
    let full = bundle_in(&dir.join("full"));
    let levels = &full.columns["clinic"].levels;
    assert_eq!(levels.len(), 7);
    for (level, p) in levels {
        let (a, b) = (&refreshed.columns["clinic"].levels[level], p);
        let (a, b) = (
            a.marginal(None).unwrap().mean(),
            b.marginal(None).unwrap().mean(),
        );
        assert!(
            (a - b).abs() <= 1e-12 * b,
            "{level}: refreshed {a}, full refit {b}"
        );
    }
    // A new table without that column is refused naming it.
    let bare = dir.join("bare.csv");
    std::fs::write(&bare, "clinic,visits\nc1,2\n").unwrap();
    let stderr = encode_refusal(&[
        "--update",
        &out("first"),
        "--train",
        bare.to_str().unwrap(),
        "--out",
        &out("bare"),
    ]);
    assert!(
        stderr.contains(
            "the previous run read exposures from column 'years', which the table of new rows lacks"
        ),
        "{stderr}"
    );
}

// Refresh without refit: the stored posteriors pooled with new rows under the
// stored prior equal a full refit on old and new rows with that prior — exactly,
// as the evidence is integer — for a chosen prior and for a fitted one.
#[tokio::test]
async fn update_equals_a_full_refit() {
    let dir = scratch!("update");
    let (old, new) = split_sample(&dir, 300);
    for prior in ["2,18", "fitted"] {
        let first = dir.join(format!("first-{prior}"));
        encode(&[
            "--train",
            &old,
            "--target",
            "no_show",
            "--columns",
            "breed,postcode_area",
            "--interactions",
            "breed:clinic",
            "--prior",
            prior,
            "--readers",
            "mean,q05",
            "--out",
            first.to_str().unwrap(),
        ]);
        let refreshed = dir.join(format!("refreshed-{prior}"));
        encode(&[
            "--update",
            first.to_str().unwrap(),
            "--train",
            &new,
            "--out",
            refreshed.to_str().unwrap(),
        ]);
        let stored = bundle_in(&first);
        let refreshed_bundle = bundle_in(&refreshed);
        for (key, columns) in [("breed", "breed"), ("breed_x_clinic", "breed")] {
            // The full refit under the stored prior of this key.
            let numbers = match &stored.columns[key].prior {
                posterity::layout::AnyPosterior::Beta(b) => {
                    format!("{},{}", b.prior.a0, b.prior.b0)
                }
                other => panic!("{other:?}"),
            };
            let full = dir.join(format!("full-{prior}-{key}"));
            let mut args = vec![
                "--train",
                &sample(),
                "--target",
                "no_show",
                "--columns",
                columns,
                "--prior",
                &numbers,
                "--readers",
                "mean,q05",
            ]
            .into_iter()
            .map(String::from)
            .collect::<Vec<_>>();
            if key == "breed_x_clinic" {
                args.extend(["--interactions".into(), "breed:clinic".into()]);
            }
            args.extend(["--out".into(), full.display().to_string()]);
            encode(&args.iter().map(String::as_str).collect::<Vec<_>>());
            let full_bundle = bundle_in(&full);
            assert_eq!(
                refreshed_bundle.columns[key].levels, full_bundle.columns[key].levels,
                "{prior} {key}"
            );
            for reader in ["mean", "q05"] {
                let name = format!("{key}_{reader}");
                let (a, b) = (
                    column(&refreshed.join(format!("encodings/{key}.parquet")), &name).await,
                    column(&full.join(format!("encodings/{key}.parquet")), &name).await,
                );
                assert!(a.len() > 200 && a == b, "{prior} {name}");
            }
        }
    }
}

// A target (or exposure) outside its family's range is refused by option name,
// with the number of rows and one such value, before anything is written; so are a
// text target for a numeric family and NaN times for as-of encodings. A refresh
// checks its new rows alike.
#[test]
fn targets_outside_the_family_are_refused_by_name() {
    let dir = scratch!("bad-targets");
    let train = dir.join("train.csv");
    let mut csv = String::from("k,real,count,outcome,exposure,class,day\n");
    for i in 0..40 {
        let real = ["1.5", "NaN", "inf", "-inf", "", "1e200"][i % 6];
        let count = ["0", "3", "-1", ""][i % 4];
        let outcome = ["0", "1", "2", ""][i % 4];
        let exposure = ["1", "0.5", "-2", ""][i % 4];
        let class = ["a", "b"][i % 2];
        let day = ["1", "2", "NaN", ""][i % 4];
        csv.push_str(&format!(
            "k{},{real},{count},{outcome},{exposure},{class},{day}\n",
            i % 5
        ));
    }
    std::fs::write(&train, csv).unwrap();
    let train = train.to_str().unwrap();
    let out = dir.join("out");
    for (args, fragments) in [
        (
            vec!["--target", "real"],
            vec![
                "--target 'real' has 27 row(s)",
                "for example",
                "finite numbers between -1e100 and 1e100 for the nig family",
            ],
        ),
        (
            vec!["--target", "count", "--family", "gamma"],
            vec![
                "--target 'count' has 10 row(s)",
                "-1",
                "counts from 0 to 1e100",
            ],
        ),
        (
            vec!["--target", "outcome", "--family", "beta"],
            vec!["--target 'outcome' has 10 row(s)", "2", "0 or 1"],
        ),
        (
            vec![
                "--target",
                "outcome",
                "--family",
                "gamma",
                "--exposure",
                "exposure",
            ],
            vec![
                "--exposure 'exposure' has 10 row(s)",
                "-2",
                "from 0 to 1e100",
            ],
        ),
        (
            vec!["--target", "class", "--family", "nig"],
            vec!["--target 'class' is not numeric", "dirichlet"],
        ),
        (
            vec![
                "--target",
                "outcome",
                "--family",
                "gamma",
                "--exposure",
                "class",
            ],
            vec!["--exposure 'class' is not numeric"],
        ),
        (
            vec!["--target", "class", "--time-column", "day"],
            vec!["--time-column 'day' has 10 row(s) with NaN"],
        ),
    ] {
        let mut all = vec![
            "--train",
            train,
            "--columns",
            "k",
            "--out",
            out.to_str().unwrap(),
        ];
        all.extend(args.iter().copied());
        let stderr = encode_refusal(&all);
        for f in fragments {
            assert!(stderr.contains(f), "{args:?}: {stderr}");
        }
        assert!(!out.exists(), "{args:?}");
    }
    // A refresh of a continuous-target bundle with new rows holding NaN.
    let good = dir.join("good.csv");
    std::fs::write(&good, "k,real\nk1,1.5\nk2,2.5\nk1,3\n").unwrap();
    encode(&[
        "--train",
        good.to_str().unwrap(),
        "--target",
        "real",
        "--columns",
        "k",
        "--out",
        out.to_str().unwrap(),
    ]);
    let fresh = dir.join("fresh");
    let o = encode_output(&[
        "encode",
        "--update",
        out.to_str().unwrap(),
        "--train",
        train,
        "--out",
        fresh.to_str().unwrap(),
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(stderr.contains("--target 'real' has 27 row(s)"), "{stderr}");
    assert!(!fresh.exists());
}

// A 0/1 target written with `NA` for missing values is read as text. Encoding its
// three "classes" would change the family without a word, so encode refuses and
// names the two ways out; read with `--csv-null NA` it encodes exactly as the same
// file with empty fields does (the file is then read through a view, whose rows must
// be numbered in the file's order on every scan).
#[tokio::test]
async fn a_target_of_numbers_with_a_missing_marker_is_refused_until_named() {
    let dir = scratch!("missing-marker");
    let (mut marked, mut empty) = (String::from("k,y\n"), String::from("k,y\n"));
    for i in 0..3000 {
        let y = ["0", "1", "NA", "1", "0"][(i * 7 + i / 13) % 5];
        marked.push_str(&format!("k{},{y}\n", i % 37));
        empty.push_str(&format!("k{},{}\n", i % 37, if y == "NA" { "" } else { y }));
    }
    let (marked_csv, empty_csv) = (dir.join("marked.csv"), dir.join("empty.csv"));
    std::fs::write(&marked_csv, marked).unwrap();
    std::fs::write(&empty_csv, empty).unwrap();
    let (marked_csv, empty_csv) = (marked_csv.to_str().unwrap(), empty_csv.to_str().unwrap());
    let out = |name: &str| dir.join(name).to_str().unwrap().to_string();
    let common = |train: &str, to: &str| {
        [
            "--train",
            train,
            "--target",
            "y",
            "--columns",
            "k",
            "--out",
            to,
        ]
        .map(String::from)
        .to_vec()
    };
    let args = common(marked_csv, &out("refused"));
    let stderr = encode_refusal(&args.iter().map(String::as_str).collect::<Vec<_>>());
    for fragment in [
        "--target 'y' holds numbers and 'NA' (600 row(s))",
        "--csv-null NA",
        "--family dirichlet",
    ] {
        assert!(stderr.contains(fragment), "{stderr}");
    }
    assert!(!dir.join("refused").exists());

    let mut marked_args = common(marked_csv, &out("marked"));
    marked_args.extend(["--csv-null", "NA"].map(String::from));
    encode(&marked_args.iter().map(String::as_str).collect::<Vec<_>>());
    let empty_args = common(empty_csv, &out("empty"));
    encode(&empty_args.iter().map(String::as_str).collect::<Vec<_>>());
    let marked_rows = rows_of(&dir.join("marked/train_encoded.parquet")).await;
    let empty_rows = rows_of(&dir.join("empty/train_encoded.parquet")).await;
    assert_eq!(marked_rows.num_rows(), 3000);
    assert_eq!(marked_rows, empty_rows);
    assert_eq!(bundle_in(&dir.join("marked")).family, "beta");

    // Named, the marker is a class of its own.
    let mut classes = common(marked_csv, &out("classes"));
    classes.extend(["--family", "dirichlet"].map(String::from));
    encode(&classes.iter().map(String::as_str).collect::<Vec<_>>());
    let header = rows_of(&dir.join("classes/train_encoded.parquet"))
        .await
        .schema();
    assert!(header.column_with_name("k_NA_mean").is_some(), "{header:?}");
}

// Counts per exposure that happen to be 0 or 1 (rare events over short spans) are
// still counts: an exposure is only ever given for counts, so it sets the family.
#[test]
fn an_exposure_makes_zero_one_targets_counts() {
    let dir = scratch!("zero-one-counts");
    let train = dir.join("train.csv");
    let mut csv = String::from("k,events,years\n");
    for i in 0..200 {
        csv.push_str(&format!(
            "k{},{},{}\n",
            i % 9,
            (i % 7 == 0) as u8,
            0.5 + (i % 3) as f64
        ));
    }
    std::fs::write(&train, csv).unwrap();
    let out = dir.join("out");
    encode(&[
        "--train",
        train.to_str().unwrap(),
        "--target",
        "events",
        "--exposure",
        "years",
        "--columns",
        "k",
        "--out",
        out.to_str().unwrap(),
    ]);
    let bundle = bundle_in(&out);
    assert_eq!(bundle.family, "gamma");
    assert_eq!(bundle.exposure.as_deref(), Some("years"));
}

// Every input is checked before any output is written, and an output directory
// ends up holding exactly one run's files.
#[test]
fn inputs_are_checked_first_and_outputs_replace_a_run_whole() {
    let dir = scratch!("checks");
    let train = random_key_csv(&dir, 200, 7);
    let out = dir.join("out");
    let out_s = out.display().to_string();
    let score = dir.join("score.csv");
    std::fs::write(&score, "id,other\n1,2\n").unwrap();
    let o = encode_output(&[
        "encode",
        "--train",
        &train,
        "--target",
        "y",
        "--columns",
        "key",
        "--score",
        score.to_str().unwrap(),
        "--out",
        &out_s,
    ]);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{stderr}");
    assert!(
        stderr
            .contains("key column 'key' is not a column of the scoring table (columns: id, other)"),
        "{stderr}"
    );
    assert!(
        !out.exists(),
        "nothing may be written before the inputs are checked"
    );
    // Internal names never reach the user.
    for (args, message) in [
        (
            vec!["--columns", "key", "--interactions", "key:nosuch"],
            "key column 'nosuch' is not a column of the training table",
        ),
        (
            vec!["--columns", "key,key"],
            "key 'key' is named twice; name each key once",
        ),
        (
            vec!["--columns", "key", "--readers", "mean,q50,q50"],
            "the readers of key 'key' give the column 'key_q50' twice",
        ),
        (
            vec!["--columns", "key", "--score", "nosuch.csv"],
            "--score: 'nosuch.csv' does not exist",
        ),
        (
            vec![
                "--columns",
                "key",
                "--method",
                "kfold",
                "--time-column",
                "t",
            ],
            "--time-column 't' is only used by --method time",
        ),
        (
            vec!["--columns", "key", "--exposure", "t", "--family", "beta"],
            "--exposure is for count targets (the gamma family)",
        ),
    ] {
        let mut all = vec![
            "encode", "--train", &train, "--target", "y", "--out", &out_s,
        ];
        all.extend(args);
        let o = encode_output(&all);
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert!(stderr.contains(message), "{all:?}: {stderr}");
        assert!(!stderr.contains("__"), "internal name in: {stderr}");
        assert!(!out.exists());
    }
    // A run with two keys, then one with one key: no stale encoding table remains.
    encode(&[
        "--train",
        &train,
        "--target",
        "y",
        "--columns",
        "key,t",
        "--out",
        &out_s,
    ]);
    assert!(out.join("encodings/t.parquet").exists());
    encode(&[
        "--train",
        &train,
        "--target",
        "y",
        "--columns",
        "key",
        "--out",
        &out_s,
    ]);
    assert!(!out.join("encodings/t.parquet").exists());
    assert!(out.join("encodings/key.parquet").exists());
    // A directory holding other files is refused unless told to replace it.
    let foreign = dir.join("foreign");
    std::fs::create_dir_all(&foreign).unwrap();
    std::fs::write(foreign.join("notes.txt"), "keep me").unwrap();
    let foreign_s = foreign.display().to_string();
    let o = encode_output(&[
        "encode",
        "--train",
        &train,
        "--target",
        "y",
        "--columns",
        "key",
        "--out",
        &foreign_s,
    ]);
    assert_eq!(o.status.code(), Some(2));
    assert!(foreign.join("notes.txt").exists());
    encode(&[
        "--train",
        &train,
        "--target",
        "y",
        "--columns",
        "key",
        "--out",
        &foreign_s,
        "--replace",
    ]);
    assert!(!foreign.join("notes.txt").exists());
}

// Every reader column of every output is a finite number, for every family and
// prior — including a NIG prior whose spread is infinite (alpha0 < 1), where the sd
// reader falls back to half the central 68 % interval.
#[tokio::test]
async fn outputs_are_finite_for_every_family_and_prior() {
    let dir = scratch!("finite");
    let train = sample();
    let cases: [(&str, &str, &[&str]); 8] = [
        ("no_show", "beta", &["fitted", "jeffreys", "0.01,0.01"]),
        ("amount", "nig", &["fitted", "0,1,0.5,1"]),
        ("amount", "nig", &["60,0.001,0.01,1000"]),
        ("no_show", "gamma", &["fitted", "0.5,1"]),
        ("outcome", "dirichlet", &["fitted", "0.01"]),
        ("amount", "nig", &["jeffreys"]),
        ("no_show", "beta", &["uniform"]),
        ("outcome", "dirichlet", &["uniform"]),
    ];
    let mut checked = 0;
    for (target, family, priors) in cases {
        for prior in priors {
            let out = dir.join(format!("{family}-{prior}"));
            encode(&[
                "--train",
                &train,
                "--target",
                target,
                "--family",
                family,
                "--columns",
                "breed,postcode_area",
                "--prior",
                prior,
                "--readers",
                "mean,sd,var,q05,data_weight",
                "--score",
                &train,
                "--out",
                out.to_str().unwrap(),
            ]);
            for file in ["train_encoded.parquet", "scored.parquet"] {
                let ctx = SessionContext::new();
                let df = ctx
                    .read_parquet(
                        out.join(file).to_str().unwrap(),
                        ParquetReadOptions::default(),
                    )
                    .await
                    .unwrap();
                let names: Vec<String> = df
                    .schema()
                    .fields()
                    .iter()
                    .map(|f| f.name().clone())
                    .filter(|n| n.starts_with("breed_") || n.starts_with("postcode_area_"))
                    .collect();
                assert!(names.len() >= 10, "{names:?}");
                for name in names {
                    let values = column(&out.join(file), &name).await;
                    assert_eq!(values.len(), 3000);
                    assert!(
                        values.iter().all(|v| v.is_finite()),
                        "{family} {prior} {file} {name}: a non-finite value"
                    );
                    checked += 1;
                }
            }
        }
    }
    assert!(checked > 100);
}

/// A session with posterity, the training rows `csv` as `a` and the encoded
/// Parquet file `encoded` as `enc`: what the hand computations join.
async fn rows_and_encodings(csv: &str, encoded: &Path) -> SessionContext {
    let ctx = SessionContext::new();
    posterity::register(&ctx);
    ctx.register_csv("a", csv, Default::default())
        .await
        .unwrap();
    ctx.register_parquet(
        "enc",
        encoded.to_str().unwrap(),
        ParquetReadOptions::default(),
    )
    .await
    .unwrap();
    ctx
}

/// The sample's `breed` encoded for `no_show` with `--time-column day --half-life 60
/// --prior 2,18` and `extra` into `out`; a session with the sample as `a` and the
/// output file `enc_file` as `enc`.
async fn sample_encoded_with_half_life_60(
    out: &Path,
    extra: &[&str],
    enc_file: &str,
) -> SessionContext {
    let sample = sample();
    let mut args = breed_by_day(&sample);
    args.extend(["--half-life", "60", "--out", out.to_str().unwrap()]);
    args.extend_from_slice(extra);
    encode(&args);
    rows_and_encodings(&sample, &out.join(enc_file)).await
}

/// A hand computation's one-row answer: the largest difference from it, the rows
/// compared, and the difference from a control the option must move away from.
async fn hand_comparison(ctx: &SessionContext, sql: &str) -> (f64, i64, f64) {
    let b = ctx.sql(sql).await.unwrap().collect().await.unwrap();
    let float = |c: usize| b[0].column(c).as_primitive::<Float64Type>().value(0);
    let rows = b[0].column(1).as_primitive::<Int64Type>().value(0);
    (float(0), rows, float(2))
}

/// `encode`'s arguments for the sample's breeds by day, under the fixed prior 2,18
/// (the recency and horizon hand computations).
fn breed_by_day(sample: &str) -> Vec<&str> {
    vec![
        "--train",
        sample,
        "--target",
        "no_show",
        "--columns",
        "breed",
        "--time-column",
        "day",
        "--prior",
        "2,18",
    ]
}

// Recency weighting in out-of-fold encodings (--method kfold): with --half-life H
// each row counts 2^(-age/H), its age counted from the newest training row; the
// serving encodings equal the weighted counts computed independently with power()
// in SQL.
#[tokio::test]
async fn half_life_weights_rows_by_age() {
    let dir = scratch!("half-life");
    let out = dir.join("out");
    let ctx = sample_encoded_with_half_life_60(
        &out,
        &["--readers", "mean", "--method", "kfold"],
        "encodings/breed.parquet",
    )
    .await;
    // The encoding table's readers score rows: each level's data scaled by 4/5, as
    // five-fold out-of-fold training rows see it.
    let sql = "WITH w AS (SELECT breed, no_show, power(0.5, ((SELECT MAX(day) FROM a) - day) / 60.0) AS w FROM a),
        hand AS (SELECT breed, (2.0 + 0.8 * SUM(w * no_show)) / (20.0 + 0.8 * SUM(w)) AS m FROM w GROUP BY breed)
        SELECT MAX(ABS(e.breed_mean - h.m)), COUNT(*), MAX(ABS(e.breed_mean - (2.0 + c.s) / (20.0 + c.n)))
        FROM enc e JOIN hand h USING (breed)
        JOIN (SELECT breed, SUM(no_show) AS s, COUNT(*) AS n FROM a GROUP BY breed) c USING (breed)";
    let (worst, levels, unweighted) = hand_comparison(&ctx, sql).await;
    assert_eq!(levels, 273);
    assert!(
        worst < 1e-12,
        "weighted encodings differ from the hand computation by {worst}"
    );
    assert!(unweighted > 1e-3, "the weights must change the encodings");
    // The options that cannot go with it say so.
    let o = encode_output(&[
        "encode",
        "--train",
        &sample(),
        "--target",
        "no_show",
        "--columns",
        "breed",
        "--time-column",
        "breed",
        "--half-life",
        "60",
        "--method",
        "kfold",
        "--out",
        dir.join("bad").to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(2));
}

// As-of encodings with a half-life (a time column's method unless k-fold is asked
// for, also with --half-life): a row at day t reads its level's rows of
// earlier days, each weighted 2^(-(t - day)/H); equal to that sum computed
// independently with power() in SQL. A half-life too short for the running sums
// over the period is refused.
#[tokio::test]
async fn as_of_half_life_weights_earlier_rows_by_their_age() {
    let dir = scratch!("as-of-half-life");
    let out = dir.join("out");
    let ctx = sample_encoded_with_half_life_60(&out, &[], "train_encoded.parquet").await;
    let sql = "WITH g AS (SELECT DISTINCT breed, day FROM a WHERE breed IS NOT NULL),
        hand AS (SELECT g.breed, g.day,
            (2.0 + COALESCE(SUM(power(0.5, (g.day - a.day) / 60.0) * a.no_show), 0))
              / (20.0 + COALESCE(SUM(power(0.5, (g.day - a.day) / 60.0)), 0)) AS m,
            (2.0 + COALESCE(SUM(a.no_show), 0)) / (20.0 + COUNT(a.no_show)) AS unweighted
            FROM g LEFT JOIN a ON a.breed = g.breed AND a.day < g.day GROUP BY g.breed, g.day)
        SELECT MAX(ABS(e.breed_mean - h.m)), COUNT(*), MAX(ABS(e.breed_mean - h.unweighted))
        FROM enc e JOIN hand h ON e.breed = h.breed AND e.day = h.day";
    let (worst, rows, unweighted) = hand_comparison(&ctx, sql).await;
    assert!(rows > 1000, "{rows} rows compared");
    assert!(
        worst < 1e-12,
        "as-of weighted encodings differ from the hand computation by {worst}"
    );
    assert!(unweighted > 1e-3, "the weights must change the encodings");
    for (half_life, expected) in [
        (
            "0.0001",
            "out of range for as-of encodings over a training period",
        ),
        (
            "0",
            "--half-life 0 is out of range; allowed: a finite number > 0",
        ),
        (
            "-1",
            "--half-life -1 is out of range; allowed: a finite number > 0",
        ),
        (
            "soon",
            "--half-life 'soon' is not a number of time units or 'fitted'",
        ),
    ] {
        let o = encode_output(&[
            "encode",
            "--train",
            &sample(),
            "--target",
            "no_show",
            "--columns",
            "breed",
            "--time-column",
            "day",
            "--method",
            "time",
            "--half-life",
            half_life,
            "--out",
            dir.join("bad").to_str().unwrap(),
        ]);
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{stderr}");
        assert!(stderr.contains(expected), "{stderr}");
    }
}

// --horizon H: an as-of training row reads only its level's rows at least H time
// units older (as a scored row H past the training period does); with a half-life
// too, those rows weighted by their age. Every row against the counts computed
// independently in SQL; `matched` takes the scored rows' median time past the
// newest training row; bad horizons are refused by name with the allowed range.
#[tokio::test]
async fn as_of_horizon_reads_only_rows_that_old() {
    let dir = scratch!("as-of-horizon");
    let sample = sample();
    // Scored rows 1..30 days past the newest training day (364): median 15.5.
    let later = dir.join("later.csv");
    let mut text = String::from("day,breed\n");
    for d in 1..=30 {
        text.push_str(&format!("{},breed_00{}\n", 364 + d, d % 10));
    }
    std::fs::write(&later, text).unwrap();
    let later = later.to_str().unwrap();
    let run = |name: &str, extra: &[&str]| {
        let out = dir.join(name);
        let mut args = breed_by_day(&sample);
        args.extend(["--out", out.to_str().unwrap()]);
        args.extend_from_slice(extra);
        encode(&args);
        out
    };
    let cases = [
        (run("h30", &["--horizon", "30"]), 30.0, None),
        (
            run(
                "h30-hl60",
                // A time column makes the encodings as-of without --method time.
                &["--horizon", "30", "--half-life", "60"],
            ),
            30.0,
            Some(60.0),
        ),
        (
            run("matched", &["--horizon", "matched", "--score", later]),
            15.5,
            None,
        ),
    ];
    for (out, horizon, half_life) in cases {
        let summary: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap())
                .unwrap();
        assert_eq!(summary[0]["horizon"], horizon, "{summary}");
        let ctx = rows_and_encodings(&sample, &out.join("train_encoded.parquet")).await;
        let weight = match half_life {
            Some(h) => format!("power(0.5, (g.day - a.day) / {h:?})"),
            None => "1.0".to_string(),
        };
        let sql = format!(
            "WITH g AS (SELECT DISTINCT breed, day FROM a WHERE breed IS NOT NULL),
            hand AS (SELECT g.breed, g.day,
                (2.0 + COALESCE(SUM({weight} * a.no_show), 0))
                  / (20.0 + COALESCE(SUM(CASE WHEN a.no_show IS NOT NULL THEN {weight} END), 0)) AS m
                FROM g LEFT JOIN a ON a.breed = g.breed AND a.day <= g.day - {horizon:?}
                GROUP BY g.breed, g.day),
            every_earlier AS (SELECT g.breed, g.day,
                (2.0 + COALESCE(SUM(a.no_show), 0)) / (20.0 + COUNT(a.no_show)) AS m
                FROM g LEFT JOIN a ON a.breed = g.breed AND a.day < g.day GROUP BY g.breed, g.day)
            SELECT MAX(ABS(e.breed_mean - h.m)), COUNT(*), MAX(ABS(e.breed_mean - x.m))
            FROM enc e JOIN hand h ON e.breed = h.breed AND e.day = h.day
              JOIN every_earlier x ON e.breed = x.breed AND e.day = x.day"
        );
        let (worst, rows, every_earlier) = hand_comparison(&ctx, &sql).await;
        assert!(rows > 1000, "{rows} rows compared");
        assert!(
            worst < 1e-12,
            "{out:?}: differs from the hand computation by {worst}"
        );
        assert!(
            every_earlier > 1e-3,
            "{out:?}: the horizon must change the encodings"
        );
    }
    let bad = dir.join("bad");
    let bad = bad.to_str().unwrap();
    let inside = dir.join("inside.csv");
    std::fs::write(&inside, "day,breed\n10,breed_001\n364,breed_002\n").unwrap();
    let no_time = dir.join("no_time.csv");
    std::fs::write(&no_time, "breed\nbreed_001\n").unwrap();
    let out = run(
        "inside",
        &["--horizon", "matched", "--score", inside.to_str().unwrap()],
    );
    let summary = std::fs::read_to_string(out.join("summary.json")).unwrap();
    assert!(
        summary.contains("no horizon: no scored row is later than the newest training row"),
        "{summary}"
    );
    let out = run("longer", &["--horizon", "400"]);
    let summary = std::fs::read_to_string(out.join("summary.json")).unwrap();
    assert!(
        summary.contains(
            "the horizon of breed (400) is at least the training period (364): every training row reads the prior"
        ),
        "{summary}"
    );
    for (extra, expected) in [
        (
            &["--horizon", "0"][..],
            "--horizon 0 is out of range; allowed: a finite number > 0",
        ),
        (
            &["--half-life", "30", "--horizon", "0"],
            "--horizon 0 is out of range; allowed: a finite number > 0",
        ),
        (
            &["--horizon", "-2"],
            "--horizon -2 is out of range; allowed: a finite number > 0",
        ),
        (
            &["--horizon", "nan"],
            "--horizon NaN is out of range; allowed: a finite number > 0",
        ),
        (
            &["--horizon", "soon"],
            "--horizon 'soon' is not a number of time units, 'matched' or 'none'",
        ),
        (
            &["--horizon", "30", "--method", "kfold"],
            "--horizon applies to as-of encodings (--method time), not to --method kfold",
        ),
        (&["--horizon", "matched"], "--horizon matched needs --score"),
        (
            &["--horizon", "matched", "--score", no_time.to_str().unwrap()],
            "--horizon matched needs the --time-column 'day' in the scoring table, of numbers as in the training table",
        ),
        // Text is ordered as written, the order of time only for ISO dates and times.
        (
            &["--time-column", "channel"],
            "--time-column 'channel' of the training table is text, and 5 distinct values of it are not ISO dates or times (for example 'app')",
        ),
    ] {
        let mut args = vec![
            "--train",
            &sample,
            "--target",
            "no_show",
            "--columns",
            "breed",
            "--out",
            bad,
        ];
        if !extra.contains(&"--time-column") {
            args.extend(["--time-column", "day"]);
        }
        args.extend_from_slice(extra);
        let stderr = encode_refusal(&args);
        assert!(stderr.contains(expected), "{extra:?}: {stderr}");
    }
    let o = encode_output(&[
        "encode",
        "--train",
        &sample,
        "--target",
        "no_show",
        "--columns",
        "breed",
        "--horizon",
        "30",
        "--out",
        bad,
    ]);
    assert!(String::from_utf8_lossy(&o.stderr).contains("--horizon needs --time-column"));
}

// A date or timestamp --time-column counts time in days: the sample's `booked_on`
// (a date, the same day as its `day` number) and a timestamp six hours into that
// day give the encodings `day` gives, with recency weights, a horizon and a horizon
// matched to scored rows' times; as-of encodings alone order any column (the date
// as ISO text too); a time of another type is refused by name where units count.
#[tokio::test]
async fn dates_and_timestamps_count_time_in_days() {
    let dir = scratch!("time-in-days");
    let (train, later) = (dir.join("train.parquet"), dir.join("later.parquet"));
    for (file, rows) in [(&train, "day < 300"), (&later, "day >= 300")] {
        let select = format!(
            "SELECT *, CAST(booked_on AS TIMESTAMP) + INTERVAL '6 hours' AS booked_at, \
             CAST(booked_on AS VARCHAR) AS booked_text, no_show = 1 AS late, \
             CAST(booked_on AS VARCHAR) || CASE WHEN appointment_id % 2 = 0 THEN 'T08:00:00+02:00' \
               ELSE 'T07:00:00Z' END AS booked_offset FROM a WHERE {rows}"
        );
        sample_to_parquet(&select, file).await;
    }
    let types = rows_of(&train).await.schema();
    assert_eq!(
        types.field_with_name("booked_on").unwrap().data_type(),
        &DataType::Date32
    );
    assert!(matches!(
        types.field_with_name("booked_at").unwrap().data_type(),
        DataType::Timestamp(_, _)
    ));
    let (train, later) = (train.to_str().unwrap(), later.to_str().unwrap());
    let breed = [
        "--train",
        train,
        "--target",
        "no_show",
        "--columns",
        "breed",
    ];
    // ISO text counts days as the dates it spells.
    let days = ["day", "booked_on", "booked_at", "booked_text"];
    let options: [(&[&str], &[&str]); 4] = [
        (&["--method", "time"], &days),
        (&["--half-life", "30", "--method", "kfold"], &days),
        (&["--half-life", "30", "--horizon", "7"], &days),
        (&["--horizon", "matched", "--score", later], &days),
    ];
    for (n, (extra, times)) in options.into_iter().enumerate() {
        let mut means = Vec::new();
        for &time in times {
            let out = dir.join(format!("{time}-{n}"));
            let mut args = breed.to_vec();
            args.extend(["--time-column", time, "--out", out.to_str().unwrap()]);
            args.extend_from_slice(extra);
            encode(&args);
            let summary: serde_json::Value =
                serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap())
                    .unwrap();
            // Messages give dates' horizons in days.
            let reason = summary[0]["horizon_reason"].as_str().unwrap_or_default();
            if extra.contains(&"7") {
                let want = ["horizon 7 (--horizon)", "horizon 7 days (--horizon)"];
                assert_eq!(reason, want[usize::from(time != "day")], "{time}");
            }
            let enc = out.join("train_encoded.parquet");
            means.push((
                time,
                summary[0]["horizon"].clone(),
                column(&enc, "breed_mean").await,
            ));
        }
        let (_, horizon, by_day) = &means[0];
        for (time, h, m) in &means[1..] {
            assert_eq!(h, horizon, "{extra:?}: --time-column {time}");
            let worst = largest_difference(by_day, m);
            assert!(
                worst < 1e-12,
                "{extra:?}: --time-column {time} differs by {worst}"
            );
        }
    }
    let bad = dir.join("bad");
    let bad = bad.to_str().unwrap();
    // Text written with differing offsets from UTC is not in time order as written,
    // and a true/false column has no order of time; scored rows' text times are
    // checked as the training rows' are.
    let us_dates = dir.join("us_dates.csv");
    std::fs::write(&us_dates, "breed,booked_text\nbreed_001,1/5/2026\n").unwrap();
    for (time, extra, expected) in [
        (
            "booked_text",
            &["--score", us_dates.to_str().unwrap()][..],
            "--time-column 'booked_text' of the scoring table is text, and one value of it is \
             not an ISO date or time (for example '1/5/2026')",
        ),
        (
            "booked_offset",
            &[][..],
            "--time-column 'booked_offset' of the training table is text whose order as \
             written is not its order in time: '2025-01-01T08:00:00+02:00' is no later than a \
             value before it as text",
        ),
        (
            "late",
            &[],
            "--time-column 'late' is true/false; allowed: numbers (days, hours, ...), dates, \
             timestamps or text of ISO dates and times",
        ),
    ] {
        let refused = [&breed[..], &["--time-column", time, "--out", bad], extra];
        let stderr = encode_refusal(&refused.concat());
        assert!(stderr.contains(expected), "{time}: {stderr}");
    }
    // An as-of half-life too short for the period is refused in days too.
    let short = [
        &breed[..],
        &["--time-column", "booked_on", "--half-life", "0.01"],
        &["--method", "time", "--out", bad],
    ];
    let stderr = encode_refusal(&short.concat());
    assert!(
        stderr.contains(
            "--half-life 0.01 is out of range for as-of encodings over a training period of 29"
        ) && stderr.contains(" days; allowed: at least 0.29"),
        "{stderr}"
    );
}

// Column types users bring (Parquet from other tools, pandas' category dtype): a
// decimal amount is continuous, a dictionary-encoded class or 0/1 column is read by
// its values, each giving the encodings of its plain column; a key with no text form
// (a struct, a map) is refused by name.
#[tokio::test]
async fn decimal_and_dictionary_columns_encode_as_their_values() {
    let dir = scratch!("column-types");
    let typed = dir.join("typed.parquet");
    let select =
        "SELECT breed, amount, outcome, no_show, CAST(amount AS DECIMAL(10, 2)) AS amount_d, \
         arrow_cast(outcome, 'Dictionary(Int32, Utf8)') AS outcome_d, \
         arrow_cast(no_show, 'Dictionary(Int32, Int64)') AS no_show_d, \
         named_struct('name', breed) AS breed_s FROM a";
    sample_to_parquet(select, &typed).await;
    let typed = typed.to_str().unwrap();
    for (plain, typed_target, family, reader) in [
        ("amount", "amount_d", "nig", "breed_mean"),
        ("outcome", "outcome_d", "dirichlet", "breed_no_show_mean"),
        ("no_show", "no_show_d", "beta", "breed_mean"),
    ] {
        let mut means = Vec::new();
        for target in [plain, typed_target] {
            let out = dir.join(target);
            let o = out.to_str().unwrap();
            encode(&[
                "--train",
                typed,
                "--target",
                target,
                "--columns",
                "breed",
                "--out",
                o,
            ]);
            let summary: serde_json::Value =
                serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap())
                    .unwrap();
            assert_eq!(summary[0]["family"], family, "{target}: {summary}");
            means.push(column(&out.join("train_encoded.parquet"), reader).await);
        }
        let worst = largest_difference(&means[0], &means[1]);
        assert!(
            worst < 1e-12,
            "{typed_target} differs from {plain} by {worst}"
        );
    }
    let bad = dir.join("bad");
    let stderr = encode_refusal(&[
        "--train",
        typed,
        "--target",
        "no_show",
        "--columns",
        "breed_s",
        "--out",
        bad.to_str().unwrap(),
    ]);
    assert!(
        stderr
            .contains("key column 'breed_s' of the training table is a struct with fields {name}")
            && stderr.contains("which has no text form; allowed: text, numbers, booleans"),
        "{stderr}"
    );
}

// Messy key text: with --normalize-keys, spellings that differ in case, white space
// or Unicode compatibility form (full-width letters, non-breaking spaces) are one
// level, the merge is reported, and the bundle scores raw spellings the same way.
#[tokio::test]
async fn normalized_keys_merge_spellings() {
    let dir = scratch!("normalize");
    let train = dir.join("train.csv");
    std::fs::write(
        &train,
        "breed,y\nGolden Retriever,1\n golden  retriever ,0\n\u{ff27}\u{ff4f}lden\u{00a0}Retriever,1\nPoodle,0\npoodle,1\n",
    )
    .unwrap();
    let out = dir.join("out");
    let o = encode_output(&[
        "encode",
        "--train",
        train.to_str().unwrap(),
        "--target",
        "y",
        "--columns",
        "breed",
        "--normalize-keys",
        "--prior",
        "1,1",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stdout)
        .contains("breed: normalising the key text merged 3 spellings into other levels"));
    let bundle = bundle_in(&out);
    let breed = &bundle.columns["breed"];
    assert_eq!(
        breed.levels.keys().collect::<Vec<_>>(),
        ["golden retriever", "poodle"]
    );
    assert_eq!(breed.levels["golden retriever"].evidence(), 3.0);
    assert_eq!(
        breed.level_of(&[Some("GOLDEN   Retriever")]).as_deref(),
        Some("golden retriever")
    );
    assert_eq!(
        posterity::bundle::normalize_key("  \u{ff30}oodle\t"),
        "poodle",
        "full-width P (U+FF30) is P in compatibility form"
    );
}

// Each key's treatment: clinic, asked for as levels, is one indicator per level
// ranked by size; breed, asked for as codes, is its position among the sorted
// training levels, -1 unseen; postcode_area and channel (5 levels, each with at
// least 100 rows) stay posterior encodings, channel with an indicator for every
// level. The summary says why; the bundle gives the same codes.
#[tokio::test]
async fn treatments_follow_the_data_and_the_user() {
    let dir = scratch!("treatments");
    let score = dir.join("score.csv");
    std::fs::write(
        &score,
        "clinic,breed,postcode_area,channel\nclinic_03,breed_017,PA0011,phone\nclinic_99,no_such_breed,PA0011,phone\n,,,\n",
    )
    .unwrap();
    let out = dir.join("out");
    let o = encode_output(&[
        "encode",
        "--train",
        &sample(),
        "--target",
        "no_show",
        "--columns",
        "clinic,breed,postcode_area,channel",
        "--treatment",
        "breed=codes,clinic=levels",
        "--score",
        score.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(
        stdout.contains("clinic as levels: chosen (--treatment)"),
        "{stdout}"
    );
    assert!(
        stdout.contains(
            "channel as posterior: 5 levels, each with at least 100 rows: readers and an \
             indicator for every level"
        ),
        "{stdout}"
    );
    assert!(
        stdout.contains("breed as codes: chosen (--treatment)"),
        "{stdout}"
    );
    assert!(
        stdout.contains("postcode_area as posterior: 829 levels"),
        "{stdout}"
    );
    let ctx = SessionContext::new();
    ctx.register_csv("a", &sample(), Default::default())
        .await
        .unwrap();
    for (name, file) in [("tr", "train_encoded"), ("sc", "scored")] {
        ctx.register_parquet(
            name,
            out.join(format!("{file}.parquet")).to_str().unwrap(),
            ParquetReadOptions::default(),
        )
        .await
        .unwrap();
    }
    let columns: Vec<String> = ctx
        .table("tr")
        .await
        .unwrap()
        .schema()
        .fields()
        .iter()
        .map(|f| f.name().clone())
        .collect();
    let clinic: Vec<&String> = columns
        .iter()
        .filter(|c| c.starts_with("clinic_"))
        .collect();
    assert_eq!(clinic.len(), 12, "{columns:?}");
    assert!(columns.contains(&"breed_code".to_string()));
    assert!(!columns
        .iter()
        .any(|c| c.starts_with("breed_mean") || c.starts_with("clinic_mean")));
    assert!(columns.contains(&"postcode_area_mean".to_string()));
    // Every training row has exactly the indicator of its clinic's size rank, and
    // breed's code is its rank among the sorted distinct breeds.
    let indicators = clinic
        .iter()
        .map(|c| format!("\"{c}\""))
        .collect::<Vec<_>>()
        .join(" + ");
    let rank_sum = clinic
        .iter()
        .enumerate()
        .map(|(i, c)| format!("{} * \"{c}\"", i + 1))
        .collect::<Vec<_>>()
        .join(" + ");
    let sql = format!(
        "WITH sizes AS (SELECT clinic, row_number() OVER (ORDER BY COUNT(*) DESC, clinic) AS r FROM a GROUP BY clinic),
              codes AS (SELECT breed, row_number() OVER (ORDER BY breed) - 1 AS code FROM (SELECT DISTINCT breed FROM a))
         SELECT COUNT(*), COUNT(*) FILTER (WHERE {indicators} = 1 AND {rank_sum} = s.r AND t.breed_code = c.code)
         FROM tr t JOIN sizes s ON s.clinic = t.clinic JOIN codes c ON c.breed = t.breed"
    );
    let b = ctx.sql(&sql).await.unwrap().collect().await.unwrap();
    let count = |c: usize| b[0].column(c).as_primitive::<Int64Type>().value(0);
    assert_eq!((count(0), count(1)), (3000, 3000));
    // Scored: a known clinic and breed, then unseen ones, then NULL keys.
    let b = ctx
        .sql(&format!(
            "SELECT CAST(breed_code AS BIGINT), CAST({indicators} AS BIGINT) FROM sc"
        ))
        .await
        .unwrap()
        .collect()
        .await
        .unwrap();
    let codes: Vec<i64> = b[0].column(0).as_primitive::<Int64Type>().values().to_vec();
    let ones: Vec<i64> = b[0].column(1).as_primitive::<Int64Type>().values().to_vec();
    let bundle = bundle_in(&out);
    let breed = &bundle.columns["breed"];
    assert_eq!(
        codes,
        vec![breed.codes()["breed_017"], -1, -1],
        "bundle and scored codes differ"
    );
    assert!(codes[0] >= 0);
    assert_eq!(ones, vec![1, 0, 0]);
    let summary = std::fs::read_to_string(out.join("summary.json")).unwrap();
    assert!(summary.contains("\"treatment\": \"levels\""), "{summary}");

    // What cannot be asked says so, naming the option, the key and the choices.
    for (treatment, fragments) in [
        (
            "nosuch=levels",
            vec![
                "--treatment",
                "'nosuch' is not an encoded key",
                "clinic, breed",
            ],
        ),
        (
            "breed=onehot",
            vec!["--treatment", "'onehot'", "posterior, levels or codes"],
        ),
        ("breed", vec!["--treatment 'breed'", "KEY=AS"]),
        (
            "appointment_id=levels",
            vec!["appointment_id=levels", "3000 levels", "at most 1000"],
        ),
    ] {
        let o = encode_output(&[
            "encode",
            "--train",
            &sample(),
            "--target",
            "no_show",
            "--columns",
            "clinic,breed,appointment_id",
            "--treatment",
            treatment,
            "--out",
            dir.join("bad").to_str().unwrap(),
        ]);
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{treatment}: {err}");
        for f in fragments {
            assert!(err.contains(f), "{treatment}: {f} not in {err}");
        }
        assert!(!dir.join("bad").exists());
    }
}

// Scoring with the bundle alone (`posterity::serve::score`, what Python's
// `Bundle.score` runs) gives the scored file's columns: the same names in the same
// order (it once appended keys by name) and types,
// the same values (1e-12 relative), for posterior, levels and codes keys, an
// interaction, a Dirichlet target, unseen levels and NULL keys.
// A bundle edited by hand or written by another program must not score as
// something else without a word: each thing wrong is refused by name on reading.
#[test]
fn an_altered_bundle_is_refused_by_what_is_wrong() {
    let dir = scratch!("altered-bundle");
    let (beta, classes) = (dir.join("beta"), dir.join("classes"));
    for (out, target) in [(&beta, "no_show"), (&classes, "outcome")] {
        encode(&[
            "--train",
            &sample(),
            "--target",
            target,
            "--columns",
            "breed,clinic",
            "--out",
            out.to_str().unwrap(),
        ]);
    }
    let json = |out: &Path| -> serde_json::Value {
        serde_json::from_str(&std::fs::read_to_string(out.join("bundle.json")).unwrap()).unwrap()
    };
    let (beta, classes) = (json(&beta), json(&classes));
    let level = |v: &serde_json::Value, key: &str| {
        v["columns"][key]["levels"]
            .as_object()
            .unwrap()
            .values()
            .next()
            .unwrap()
            .clone()
    };
    let (beta_level, class_level) = (level(&beta, "breed"), level(&classes, "breed"));
    let mut fewer_classes = class_level.clone();
    for field in ["classes", "a0", "counts"] {
        let list = fewer_classes[field].as_array_mut().unwrap();
        list.pop();
    }
    type Change = Box<dyn Fn(&mut serde_json::Value)>;
    let cases: Vec<(&serde_json::Value, Change, &str)> = vec![
        (
            &beta,
            Box::new(|v| v["columns"]["breed"]["levels"] = serde_json::json!([])),
            "column 'breed': 'levels' is missing or not an object of level to posterior",
        ),
        (
            &beta,
            Box::new(|v| {
                v["columns"]["clinic"]
                    .as_object_mut()
                    .unwrap()
                    .remove("levels");
            }),
            "column 'clinic': 'levels' is missing",
        ),
        (
            &beta,
            Box::new(move |v| v["columns"]["breed"]["levels"]["breed_000"] = class_level.clone()),
            "column 'breed': level 'breed_000' is a Dirichlet (classes",
        ),
        (
            &classes,
            Box::new(move |v| v["columns"]["breed"]["levels"]["breed_000"] = beta_level.clone()),
            "level 'breed_000' is a Beta posterior, the prior a Dirichlet",
        ),
        (
            &classes,
            Box::new(move |v| v["columns"]["breed"]["levels"]["breed_000"] = fewer_classes.clone()),
            "level 'breed_000' is a Dirichlet (classes",
        ),
        (
            &beta,
            Box::new(|v| v["columns"]["breed"]["key"]["columns"] = serde_json::json!([])),
            "column 'breed': its key names no columns",
        ),
        (
            &beta,
            Box::new(|v| v["key_order"] = serde_json::json!(["breed", "vet"])),
            "key_order names 'vet', which is not a column of the bundle",
        ),
        (
            &beta,
            Box::new(|v| v["readers"] = serde_json::json!(["mean", "median"])),
            "reader 'median' is not one this build reads",
        ),
        (
            &beta,
            Box::new(|v| v["columns"]["clinic"]["readers"] = serde_json::json!(["q150"])),
            "column 'clinic': reader 'q150' is not one this build reads",
        ),
    ];
    for (original, change, said) in cases {
        assert!(Bundle::from_json(&original.to_string()).is_ok());
        let mut altered = original.clone();
        change(&mut altered);
        let e = Bundle::from_json(&altered.to_string())
            .err()
            .unwrap_or_else(|| panic!("accepted: {said}"))
            .to_string();
        assert!(e.contains(said), "{said}: {e}");
    }
}

#[tokio::test]
async fn scoring_with_the_bundle_equals_the_scored_file() {
    let dir = scratch!("serve");
    let score = dir.join("score.csv");
    let mut rows = std::fs::read_to_string(sample()).unwrap();
    rows.push_str(
        "3000,2025-12-31,365,clinic_99,phone,no_such_breed,PA0011,vet_01,attended,0,1.0\n",
    );
    rows.push_str("3001,2025-12-31,365,,,,,,no_show,1,\n");
    std::fs::write(&score, rows).unwrap();
    for (target, readers) in [
        ("no_show", "mean,sd,q05,data_weight,above:0.2"),
        ("outcome", "mean,q95"),
    ] {
        let out = dir.join(format!("out-{target}"));
        encode(&[
            "--train",
            &sample(),
            "--target",
            target,
            "--columns",
            "breed,clinic,vet,postcode_area",
            "--interactions",
            "breed:clinic",
            "--treatment",
            "vet=codes",
            "--readers",
            readers,
            "--score",
            score.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
        ]);
        let bundle = bundle_in(&out);
        let ctx = SessionContext::new();
        let scored = ctx
            .read_parquet(
                out.join("scored.parquet").to_str().unwrap(),
                ParquetReadOptions::default(),
            )
            .await
            .unwrap();
        let input_columns: Vec<&str> = vec![
            "appointment_id",
            "booked_on",
            "day",
            "clinic",
            "channel",
            "breed",
            "postcode_area",
            "vet",
            "outcome",
            "no_show",
            "amount",
        ];
        let want = datafusion::arrow::compute::concat_batches(
            &scored.schema().as_arrow().clone().into(),
            &scored.clone().collect().await.unwrap(),
        )
        .unwrap();
        let input = want
            .project(
                &input_columns
                    .iter()
                    .map(|c| want.schema().index_of(c).unwrap())
                    .collect::<Vec<_>>(),
            )
            .unwrap();
        let got = posterity::serve::score(&bundle, &input).unwrap();
        // In the same order too (keys as encode wrote them, not by name), for a
        // learner fed arrays by position.
        let names = |b: &datafusion::arrow::array::RecordBatch| -> Vec<String> {
            let schema = b.schema();
            schema.fields().iter().map(|f| f.name().clone()).collect()
        };
        assert_eq!(names(&got), names(&want), "{target}");
        for field in want.schema().fields() {
            let w = want.column_by_name(field.name()).unwrap();
            let g = got
                .column_by_name(field.name())
                .unwrap_or_else(|| panic!("{target}: no column {}", field.name()));
            let w = cast(w, g.data_type()).unwrap();
            if g.data_type() == &DataType::Float64 {
                let (w, g) = (
                    w.as_primitive::<Float64Type>(),
                    g.as_primitive::<Float64Type>(),
                );
                for i in 0..w.len() {
                    let (a, b) = (w.value(i), g.value(i));
                    assert!(
                        (a - b).abs() <= 1e-12 * a.abs().max(1e-300),
                        "{target}: {} row {i}: {a} vs {b}",
                        field.name()
                    );
                }
            } else {
                assert_eq!(&w, g, "{target}: {}", field.name());
            }
        }
        // The last two rows: an unseen level and NULL keys read the prior.
        let code = got
            .column_by_name("vet_code")
            .unwrap()
            .as_primitive::<Int64Type>();
        assert_eq!(code.value(3001), -1);
    }
}

// The training rows are never held in memory or sorted: they stream from the file,
// numbered as they pass, and the training table comes back in file order by
// merging the scan's parts (each already in order), not by sorting all rows.
#[tokio::test]
async fn training_rows_stream_in_file_order_without_a_sort() {
    use datafusion::physical_plan::displayable;
    use posterity::encode::{self, EncodeOptions};
    let dir = scratch!("streamed");
    // Four files, so the scan has several parts.
    let text = std::fs::read_to_string(sample()).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap().to_string();
    let rows: Vec<&str> = lines.collect();
    for (i, chunk) in rows.chunks(rows.len().div_ceil(4)).enumerate() {
        std::fs::write(
            dir.join(format!("part-{i}.csv")),
            format!("{header}\n{}\n", chunk.join("\n")),
        )
        .unwrap();
    }
    let config = datafusion::prelude::SessionConfig::new().with_target_partitions(4);
    let ctx = SessionContext::new_with_config(config);
    posterity::register(&ctx);
    ctx.register_csv("appointments", dir.to_str().unwrap(), Default::default())
        .await
        .unwrap();
    let options = EncodeOptions::new("appointments", "no_show", &["breed", "postcode_area"]);
    let plan = encode::resolve(&ctx, &options).await.unwrap();
    let output = encode::run(&ctx, &plan).await.unwrap();
    let train = output.train_encoded.unwrap();
    let physical = train.clone().create_physical_plan().await.unwrap();
    let shown = displayable(physical.as_ref()).indent(true).to_string();
    println!("{shown}");
    assert!(!shown.contains("SortExec"), "a sort of all rows:\n{shown}");
    assert!(shown.contains("NumberedScan: partitions=4"), "{shown}");
    // File order: the appointment ids come back as the files list them.
    let batches = train.collect().await.unwrap();
    let ids: Vec<String> = batches
        .iter()
        .flat_map(|b| {
            let c = datafusion::arrow::compute::cast(
                b.column_by_name("appointment_id").unwrap(),
                &datafusion::arrow::datatypes::DataType::Utf8,
            )
            .unwrap();
            let c = c.as_string::<i32>().clone();
            (0..c.len()).map(move |i| c.value(i).to_string())
        })
        .collect();
    let expected: Vec<String> = rows
        .iter()
        .map(|r| r.split(',').next().unwrap().to_string())
        .collect();
    assert_eq!(ids, expected);
}

// With a work directory (what a cluster needs) the intermediate tables are Parquet
// files there instead of memory; the outputs are the same bytes.
#[tokio::test]
async fn a_work_directory_gives_the_same_outputs() {
    use posterity::encode::{self, EncodeOptions};
    let dir = scratch!("workdir");
    let mut written = Vec::new();
    for work in [None, Some(dir.join("work"))] {
        let ctx = SessionContext::new();
        posterity::register(&ctx);
        ctx.register_csv("appointments", &sample(), Default::default())
            .await
            .unwrap();
        let mut options = EncodeOptions::new(
            "appointments",
            "no_show",
            &["breed", "postcode_area", "vet"],
        );
        options.work_dir = work.clone();
        let plan = encode::resolve(&ctx, &options).await.unwrap();
        let output = encode::run(&ctx, &plan).await.unwrap();
        let out = dir.join(if work.is_some() { "with" } else { "without" });
        encode::write(&output, &out, false).await.unwrap();
        written.push(out);
    }
    assert!(dir.join("work/__fit0").read_dir().unwrap().next().is_some());
    for file in [
        "bundle.json",
        "summary.json",
        "train_encoded.parquet",
        "encodings/breed.parquet",
        "encodings/vet.parquet",
    ] {
        assert_eq!(
            std::fs::read(written[0].join(file)).unwrap(),
            std::fs::read(written[1].join(file)).unwrap(),
            "{file}"
        );
    }
}

/// Training rows over 240 days for the fitted half-life: key `shifting` (40 levels)
/// whose rates swap at day 120, key `steady` (30 levels) whose rates never move,
/// and targets of every family that depend on both: `y` (0/1), `visits` (counts),
/// `minutes` (values) and `outcome` (classes).
fn drifting_csv(dir: &Path) -> String {
    let path = dir.join("drifting.csv");
    let mut text = String::from("day,shifting,steady,y,visits,minutes,outcome\n");
    for i in 0..12_000u64 {
        let day = i % 240;
        let shifting = mix64(i) % 40;
        let steady = mix64(i ^ 0x5eed) % 30;
        let early = day < 120;
        let rate_shifting = if shifting.is_multiple_of(2) == early {
            0.15
        } else {
            0.85
        };
        let rate_steady = 0.15 + 0.35 * (steady % 3) as f64;
        let rate = 0.5 * (rate_shifting + rate_steady);
        let u = uniform(7, &[i as f64]);
        let y = u64::from(u < rate);
        let visits = (3.0 * rate * uniform(8, &[i as f64]) * 2.0).floor() as u64;
        let minutes = 30.0 * rate + 10.0 * (uniform(9, &[i as f64]) - 0.5);
        let outcome = ["attended", "cancelled", "no_show"][(u * 3.0 * rate).min(2.0) as usize];
        text.push_str(&format!(
            "{day},s{shifting},t{steady},{y},{visits},{minutes},{outcome}\n"
        ));
    }
    std::fs::write(&path, text).unwrap();
    path.to_str().unwrap().to_string()
}

// The fitted half-life's reason names where the trial's scored rows begin. For a date
// column that is a date (the trial's cut is a bin edge, which can fall inside a day:
// it once read "from booked_on = 2025-10-19 04:48:00"), and the rows it counts are
// the rows with a target from that date on.
#[tokio::test]
async fn a_fitted_half_life_names_its_scored_rows_by_date() {
    use posterity::encode::{self, EncodeOptions, HalfLife};
    let ctx = SessionContext::new();
    posterity::register(&ctx);
    ctx.register_csv("a", &sample(), Default::default())
        .await
        .unwrap();
    let mut options = EncodeOptions::new("a", "no_show", &["breed"]);
    options.time_column = Some("booked_on".into());
    options.half_life = Some(HalfLife::Fitted);
    let plan = encode::resolve(&ctx, &options).await.unwrap();
    let reason = &plan.keys[0].recency;
    let named = reason
        .split_once("training rows (")
        .and_then(|(_, rest)| rest.split_once(')'))
        .map(|(inside, _)| inside.to_string())
        .unwrap_or_else(|| panic!("no scored rows named in: {reason}"));
    let (rows, date) = named
        .split_once(" rows from booked_on = ")
        .unwrap_or_else(|| panic!("{named}"));
    assert_eq!(date.len(), "2025-10-20".len(), "not a date: {reason}");
    let counted = ctx
        .sql(&format!(
            "SELECT COUNT(*) FROM a WHERE booked_on >= DATE '{date}' AND no_show IS NOT NULL"
        ))
        .await
        .unwrap()
        .collect()
        .await
        .unwrap()[0]
        .column(0)
        .as_primitive::<Int64Type>()
        .value(0);
    assert_eq!(rows, counted.to_string(), "{reason}");
}

// --half-life fitted: per key, the latest fifth of the training rows scored by fits
// of the earlier ones. A key whose levels swap rates mid-way gets a short half-life;
// a key whose rates never move gets none (recency would only throw data away). Every
// family's trial runs and its encodings are finite; the choice is reported.
#[tokio::test]
async fn fitted_half_life_follows_drift_per_key() {
    use posterity::encode::{self, EncodeOptions, HalfLife};
    let dir = scratch!("fitted-half-life");
    let ctx = SessionContext::new();
    posterity::register(&ctx);
    ctx.register_csv("rows", &drifting_csv(&dir), Default::default())
        .await
        .unwrap();
    let mut options = EncodeOptions::new("rows", "y", &["shifting", "steady"]);
    options.time_column = Some("day".into());
    options.half_life = Some(HalfLife::Fitted);
    options.method = Some(encode::Method::Kfold);
    let plan = encode::resolve(&ctx, &options).await.unwrap();
    let (shifting, steady) = (&plan.keys[0], &plan.keys[1]);
    // Judged through the earlier rows' out-of-fold encodings (most of which predate
    // the swap, so the shortest half-lives relate poorly to their own outcomes), the
    // choice is some half-life shorter than the training period.
    let h = shifting.half_life.expect(&shifting.recency);
    assert!(
        h < 239.0,
        "half-life {h} for rates that swapped 120 days ago"
    );
    assert!(
        shifting.recency.starts_with("half-life"),
        "{}",
        shifting.recency
    );
    assert_eq!(steady.half_life, None, "{}", steady.recency);
    assert!(
        steady.recency.starts_with("no half-life"),
        "{}",
        steady.recency
    );
    let output = encode::run(&ctx, &plan).await.unwrap();
    assert_eq!(output.summary[0].half_life, Some(h));
    assert!(encode::summary_table(&output.summary).contains("shifting: half-life"));

    // As-of encodings (the method a time column gives unless k-fold is asked for):
    // the earlier rows read before their own times in the trial.
    options.method = None;
    let plan = encode::resolve(&ctx, &options).await.unwrap();
    let shifting = &plan.keys[0];
    assert!(shifting.half_life.is_some(), "{}", shifting.recency);
    assert!(
        shifting.recency.contains("as-of encodings"),
        "{}",
        shifting.recency
    );
    encode::run(&ctx, &plan).await.unwrap();

    for (target, family) in [
        ("visits", "gamma"),
        ("minutes", "nig"),
        ("outcome", "dirichlet"),
    ] {
        let mut options = EncodeOptions::new("rows", target, &["shifting", "steady"]);
        options.time_column = Some("day".into());
        options.half_life = Some(HalfLife::Fitted);
        let plan = encode::resolve(&ctx, &options).await.unwrap();
        assert_eq!(plan.family.short_name(), family);
        for key in &plan.keys {
            assert!(
                !key.recency.is_empty(),
                "{target}: no reason for {}",
                key.name
            );
        }
        assert!(
            plan.keys[0].half_life.is_some(),
            "{target}: {}",
            plan.keys[0].recency
        );
        let output = encode::run(&ctx, &plan).await.unwrap();
        let batches = output.train_encoded.unwrap().collect().await.unwrap();
        let mut checked = 0;
        for b in &batches {
            for (field, column) in b.schema().fields().iter().zip(b.columns()) {
                if field.name().starts_with("shifting_") || field.name().starts_with("steady_") {
                    let values = cast(column, &DataType::Float64).unwrap();
                    let values = values.as_primitive::<Float64Type>();
                    assert_eq!(values.null_count(), 0, "{target}: {}", field.name());
                    assert!(values.values().iter().all(|v| v.is_finite()));
                    checked += values.len();
                }
            }
        }
        assert!(checked >= 12_000, "{target}: {checked} values checked");
    }

    // What cannot be fitted says why.
    assert!(HalfLife::parse("soon")
        .unwrap_err()
        .to_string()
        .contains("--half-life 'soon' is not a number of time units or 'fitted'"));
    let mut options = EncodeOptions::new("rows", "y", &["shifting"]);
    options.half_life = Some(HalfLife::Fitted);
    let e = encode::resolve(&ctx, &options).await.unwrap_err();
    assert!(
        e.to_string().contains("--half-life needs --time-column"),
        "{e}"
    );
}

// A fitted half-life where there is nothing to fit: one time only gets none and
// says why; a NaN time is refused by name before anything runs.
#[tokio::test]
async fn fitted_half_life_without_a_spread_of_times() {
    use posterity::encode::{self, EncodeOptions, HalfLife};
    let ctx = SessionContext::new();
    posterity::register(&ctx);
    for sql in [
        "CREATE TABLE one_day AS SELECT * FROM (VALUES ('a', 1, 5.0), ('a', 0, 5.0), ('b', 1, 5.0), ('b', 1, NULL)) t(k, y, day)",
        "CREATE TABLE bad_day AS SELECT * FROM (VALUES ('a', 1, 5.0), ('b', 0, 'NaN'::double)) t(k, y, day)",
    ] {
        ctx.sql(sql).await.unwrap().collect().await.unwrap();
    }
    let mut options = EncodeOptions::new("one_day", "y", &["k"]);
    options.time_column = Some("day".into());
    options.half_life = Some(HalfLife::Fitted);
    let plan = encode::resolve(&ctx, &options).await.unwrap();
    assert_eq!(plan.keys[0].half_life, None);
    assert!(
        plan.keys[0].recency.contains("times do not spread"),
        "{}",
        plan.keys[0].recency
    );
    encode::run(&ctx, &plan).await.unwrap();
    options.train = "bad_day".into();
    for method in [encode::Method::Time, encode::Method::Kfold] {
        options.method = Some(method);
        let e = encode::resolve(&ctx, &options).await.unwrap_err();
        assert!(
            e.to_string()
                .contains("--time-column 'day' has 1 row(s) with NaN or an infinite time"),
            "{e}"
        );
    }
}

/// Rows of a continuous target under two keys of 40 levels each: `volatile`, whose
/// levels' standard deviations run from e^-3 to e^3, and `calm`, whose levels all
/// have standard deviation 1 (normal draws by Box and Muller's transform).
fn spread_csv(dir: &Path, name: &str, rows: usize, seed: u64) -> String {
    let mut s = String::from("volatile,calm,y\n");
    let mut state = seed;
    let mut draw = || {
        state = mix64(state);
        uniform(state, &[])
    };
    for _ in 0..rows {
        let (v, c) = ((draw() * 40.0) as u64, (draw() * 40.0) as u64);
        let normal = (-2.0 * (1.0 - draw()).ln()).sqrt() * (std::f64::consts::TAU * draw()).cos();
        let sd = (-3.0 + 6.0 * v as f64 / 39.0).exp();
        let y = 10.0 + v as f64 / 10.0 + c as f64 / 20.0 + sd * normal;
        s.push_str(&format!("v{v},c{c},{y}\n"));
    }
    let path = dir.join(name);
    std::fs::write(&path, s).unwrap();
    path.display().to_string()
}

// The default readers follow each continuous key's spread: a key whose levels differ
// widely in spread (its prior's shape alpha0 <= 2) also gets `sd`, one whose levels
// are alike does not; the decision agrees with the prior the summary reports, the
// bundle records the key's readers (scoring with it and refreshing it keep them),
// and `--readers` given by the user is kept as given.
#[tokio::test]
async fn sd_reader_follows_the_levels_spread() {
    let dir = scratch!("spread");
    let train = spread_csv(&dir, "train.csv", 4000, 11);
    let run = |extra: &[&str], out: &Path| {
        let mut args = vec![
            "--train",
            &train,
            "--target",
            "y",
            "--columns",
            "volatile,calm",
        ];
        args.extend(extra);
        args.extend(["--out", out.to_str().unwrap()]);
        encode(&args);
    };
    let out = dir.join("out");
    run(&["--score", &train], &out);
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap()).unwrap();
    for (i, key, volatile) in [(0, "volatile", true), (1, "calm", false)] {
        let s = &summary[i];
        assert_eq!(s["key"], key);
        let alpha0 = s["prior"]["alpha0"].as_f64().unwrap();
        assert_eq!(alpha0 <= 2.0, volatile, "{key}: alpha0 {alpha0}");
        let readers: Vec<&str> = s["readers"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| r.as_str().unwrap())
            .collect();
        let want: &[&str] = if volatile { &["mean", "sd"] } else { &["mean"] };
        assert_eq!(readers, want, "{key}");
        let reason = s["readers_reason"].as_str().unwrap();
        assert!(reason.contains("alpha0 = "), "{key}: {reason}");
        let sd = format!("{key}_sd");
        let columns = texts_of_header(&out.join("train_encoded.parquet")).await;
        assert_eq!(columns.contains(&sd), volatile, "{key}: {columns:?}");
    }
    // Scoring with the bundle alone gives the scored file's sd column.
    let bundle = bundle_in(&out);
    assert_eq!(bundle.readers, ["mean"]);
    assert_eq!(
        bundle.columns["volatile"].readers.as_deref(),
        Some(&["mean".to_string(), "sd".to_string()][..])
    );
    assert_eq!(bundle.columns["calm"].readers, None);
    let scored = rows_of(&out.join("scored.parquet")).await;
    let input = scored.project(&[0, 1, 2]).unwrap();
    let served = posterity::serve::score(&bundle, &input).unwrap();
    assert_eq!(
        served.schema().fields().len(),
        scored.schema().fields().len()
    );
    let (want, got) = (
        scored
            .column_by_name("volatile_sd")
            .unwrap()
            .as_primitive::<Float64Type>(),
        served
            .column_by_name("volatile_sd")
            .unwrap()
            .as_primitive::<Float64Type>(),
    );
    for i in 0..want.len() {
        let (a, b) = (want.value(i), got.value(i));
        assert!(
            a.is_finite() && (a - b).abs() <= 1e-12 * a.abs(),
            "row {i}: {a} vs {b}"
        );
    }
    // A refresh keeps each key's readers.
    let refreshed = dir.join("refreshed");
    let more = spread_csv(&dir, "more.csv", 500, 12);
    encode(&[
        "--update",
        out.to_str().unwrap(),
        "--train",
        &more,
        "--out",
        refreshed.to_str().unwrap(),
    ]);
    let columns = texts_of_header(&refreshed.join("encodings/volatile.parquet")).await;
    assert!(columns.contains(&"volatile_sd".to_string()), "{columns:?}");
    let columns = texts_of_header(&refreshed.join("encodings/calm.parquet")).await;
    assert!(!columns.contains(&"calm_sd".to_string()), "{columns:?}");
    // Readers given are kept as given.
    let given = dir.join("given");
    run(&["--readers", "mean"], &given);
    let columns = texts_of_header(&given.join("train_encoded.parquet")).await;
    assert!(!columns.contains(&"volatile_sd".to_string()), "{columns:?}");
    let summary = std::fs::read_to_string(given.join("summary.json")).unwrap();
    assert!(summary.contains("\"readers_reason\": \"\""), "{summary}");
}

/// The column names of a Parquet file.
async fn texts_of_header(path: &Path) -> Vec<String> {
    let ctx = SessionContext::new();
    let df = ctx
        .read_parquet(path.to_str().unwrap(), ParquetReadOptions::default())
        .await
        .unwrap();
    df.schema()
        .fields()
        .iter()
        .map(|f| f.name().clone())
        .collect()
}

/// The demo sample with `district` and `region` made from the postcode area's first
/// four and three characters (a nested hierarchy); and a scoring file of the sample
/// plus rows at unseen
/// areas: in a known district, in an unseen district of a known region, in nothing
/// known, and with no area.
fn nested_sample(dir: &Path, name: &str) -> (String, String) {
    let text = std::fs::read_to_string(sample()).unwrap();
    let mut lines = text.lines();
    let mut out = format!("{},district,region\n", lines.next().unwrap());
    for line in lines {
        let area = line.split(',').nth(6).unwrap();
        out.push_str(&format!("{line},{},{}\n", &area[..4], &area[..3]));
    }
    let train = dir.join(format!("{name}.csv"));
    std::fs::write(&train, &out).unwrap();
    let mut score = out.clone();
    for (area, district, region) in [
        ("PA1299x", "PA12", "PA1"),
        ("PA9999x", "PA99", "PA1"),
        ("QQ0000", "QQ00", "QQ0"),
        ("", "PA12", "PA1"),
    ] {
        score.push_str(&format!(
            "9,2025-12-31,365,clinic_00,phone,breed_017,{area},vet_01,attended,0,1.0,{district},{region}\n"
        ));
    }
    let scored = dir.join(format!("{name}-score.csv"));
    std::fs::write(&scored, score).unwrap();
    (train.display().to_string(), scored.display().to_string())
}

/// One training row of `crossed_sample`: area, district, region, day, outcome.
type CrossedRow = (String, String, String, f64, f64);

/// The nested sample (area > district > region) with every 50th row moved to
/// district PA99, so that levels have parents other than their main one and a
/// main parent often has no row at a child's time.
fn crossed_sample(dir: &Path) -> (String, Vec<CrossedRow>) {
    let text = std::fs::read_to_string(sample()).unwrap();
    let mut lines = text.lines();
    let mut out = format!("{},district,region\n", lines.next().unwrap());
    let mut rows = Vec::new();
    for (i, line) in lines.enumerate() {
        let f: Vec<&str> = line.split(',').collect();
        let area = f[6].to_string();
        let district = if i % 50 == 0 {
            "PA99".into()
        } else {
            area[..4].to_string()
        };
        let region = area[..3].to_string();
        out.push_str(&format!("{line},{district},{region}\n"));
        let (day, y) = (f[2].parse().unwrap(), f[9].parse().unwrap());
        rows.push((area, district, region, day, y));
    }
    let train = dir.join("crossed.csv");
    std::fs::write(&train, out).unwrap();
    (train.display().to_string(), rows)
}

// `--hierarchy` with as-of encodings: every training row against a hand computation
// from the counts of the rows it may read (earlier days; with `--horizon 30`, days
// at least 30 older): its region's rows under the region's prior; its district's
// under a prior centred on the district's main region at that day less the
// district's own rows there; its area's likewise under its main district. Every
// 50th row sits in another district, so a main district is often read at a day it
// has no row of its own.
#[tokio::test]
async fn as_of_hierarchy_reads_parents_as_of_each_row() {
    use posterity::layout::AnyPosterior;
    let dir = scratch!("hierarchy-as-of");
    let (train, rows) = crossed_sample(&dir);
    // The parent most of a level's rows have (ties: the first name).
    let main_parent = |child: &dyn Fn(usize) -> String, parent: &dyn Fn(usize) -> String| {
        let mut counts: HashMap<(String, String), usize> = HashMap::new();
        for r in 0..rows.len() {
            *counts.entry((child(r), parent(r))).or_default() += 1;
        }
        let mut best: HashMap<String, (usize, String)> = HashMap::new();
        for ((c, p), n) in counts {
            let e = best.entry(c).or_insert((0, String::new()));
            if n > e.0 || (n == e.0 && p < e.1) {
                *e = (n, p);
            }
        }
        best.into_iter()
            .map(|(c, (_, p))| (c, p))
            .collect::<HashMap<_, _>>()
    };
    let main_district = main_parent(&|r| rows[r].0.clone(), &|r| rows[r].1.clone());
    let main_region = main_parent(&|r| rows[r].1.clone(), &|r| rows[r].2.clone());
    for horizon in [None, Some(30.0)] {
        let out = dir.join(format!("out-{horizon:?}"));
        let mut args = vec![
            "--train",
            &train,
            "--target",
            "no_show",
            "--columns",
            "postcode_area,district,region",
            "--hierarchy",
            "postcode_area>district>region",
            "--time-column",
            "day",
            "--out",
            out.to_str().unwrap(),
        ];
        if horizon.is_some() {
            args.extend(["--horizon", "30"]);
        }
        encode(&args);
        let bundle = bundle_in(&out);
        let prior = |key: &str| match &bundle.columns[key].prior {
            AnyPosterior::Beta(b) => b.prior,
            other => panic!("{other:?}"),
        };
        let strength = |key: &str| bundle.columns[key].parent.as_ref().unwrap().1;
        let (region_prior, s_district, s_area) = (
            prior("region"),
            strength("district"),
            strength("postcode_area"),
        );
        let readable = |row_day: f64, day: f64| match horizon {
            None => row_day < day,
            Some(h) => row_day <= day - h,
        };
        // Successes and trials of the readable rows at `day` that `keep` selects.
        let counts = |day: f64, keep: &dyn Fn(&CrossedRow) -> bool| {
            rows.iter()
                .filter(|r| readable(r.3, day) && keep(r))
                .fold((0.0, 0.0), |(s, n), r| (s + r.4, n + 1.0))
        };
        let region = |g: &str, day: f64| {
            let (s, n) = counts(day, &|r| r.2 == g);
            (region_prior.a0 + s, region_prior.b0 + n - s)
        };
        let district = |d: &str, day: f64| {
            let g = &main_region[d];
            let (ga, gb) = region(g, day);
            let (sw, nw) = counts(day, &|r| r.1 == d && r.2 == *g);
            let m = (ga - sw) / (ga + gb - nw);
            let (s, n) = counts(day, &|r| r.1 == d);
            (s_district * m + s, s_district * (1.0 - m) + n - s)
        };
        let area = |a: &str, day: f64| {
            let d = &main_district[a];
            let (da, db) = district(d, day);
            let (sw, nw) = counts(day, &|r| r.0 == a && r.1 == *d);
            let m = (da - sw) / (da + db - nw);
            let (s, n) = counts(day, &|r| r.0 == a);
            (s_area * m + s) / (s_area + n)
        };
        let encoded = out.join("train_encoded.parquet");
        let (area_means, district_means, region_means) = (
            column(&encoded, "postcode_area_mean").await,
            column(&encoded, "district_mean").await,
            column(&encoded, "region_mean").await,
        );
        let mean = |(a, b): (f64, f64)| a / (a + b);
        let mut cache = HashMap::new();
        for (row, (a, d, g, day, _)) in rows.iter().enumerate() {
            let want = *cache
                .entry((a.clone(), d.clone(), *day as i64))
                .or_insert_with(|| {
                    (
                        area(a, *day),
                        mean(district(d, *day)),
                        mean(region(g, *day)),
                    )
                });
            let got = (area_means[row], district_means[row], region_means[row]);
            for (what, got, want) in [
                ("area", got.0, want.0),
                ("district", got.1, want.1),
                ("region", got.2, want.2),
            ] {
                assert!(
                    (got - want).abs() < 1e-12,
                    "{horizon:?} row {row} ({a} {d} day {day}): {what} {got} vs {want}"
                );
            }
        }
    }
}

// `--hierarchy area>district>region`: each area's prior is centred on its
// district's posterior without the area's own rows (checked level by level from the
// bundle: prior a0 = s m, b0 = s (1 - m)), the layer's strength is where the
// marginal likelihood peaks, training rows are out of fold all the way up (every
// row against the counts outside its fold, by hand), unseen areas
// read their district (or region) as scored rows and as the bundle scores them.
#[tokio::test]
async fn hierarchy_centres_levels_on_their_parents() {
    use posterity::layout::AnyPosterior;
    let dir = scratch!("hierarchy");
    let (train, score) = nested_sample(&dir, "train");
    let run = |train: &str, out: &Path| {
        encode(&[
            "--train",
            train,
            "--target",
            "no_show",
            "--columns",
            "postcode_area,district,region",
            "--hierarchy",
            "postcode_area>district>region",
            "--score",
            &score,
            "--out",
            out.to_str().unwrap(),
        ])
    };
    let out = dir.join("out");
    run(&train, &out);
    let bundle = bundle_in(&out);
    let (parent, s) = bundle.columns["postcode_area"].parent.clone().unwrap();
    assert_eq!(parent, "district");
    assert_eq!(
        bundle.columns["district"].parent.as_ref().unwrap().0,
        "region"
    );
    assert_eq!(bundle.columns["region"].parent, None);
    // The encodings file names each area's parent district, as the bundle does.
    let areas_file = out.join("encodings/postcode_area.parquet");
    let (area_levels, area_parents) = (
        texts(&areas_file, "postcode_area").await,
        texts(&areas_file, "parent").await,
    );
    for (level, parent) in area_levels.iter().zip(&area_parents) {
        let level = level.as_ref().unwrap();
        assert_eq!(
            parent.as_ref(),
            Some(&bundle.columns["postcode_area"].parent_levels[level].0),
            "{level}"
        );
        assert_eq!(parent.as_deref(), Some(&level[..4]), "{level}: nested");
    }
    let beta = |p: &AnyPosterior| match p {
        AnyPosterior::Beta(b) => *b,
        other => panic!("{other:?}"),
    };
    // Each area's prior, from its district's posterior less the area's rows.
    let areas = &bundle.columns["postcode_area"].levels;
    let districts = &bundle.columns["district"].levels;
    let log_likelihood = |strength: f64| {
        let mut total = 0.0;
        for (area, p) in areas {
            let (a, d) = (beta(p), beta(&districts[&area[..4]]));
            let (da, db) = d.params();
            let m = (da - a.successes) / (da + db - a.trials);
            if strength == s {
                assert!(
                    (a.prior.a0 - s * m).abs() < 1e-9 * s,
                    "{area}: a0 {} vs {}",
                    a.prior.a0,
                    s * m
                );
                assert!((a.prior.b0 - s * (1.0 - m)).abs() < 1e-9 * s, "{area}: b0");
            }
            let (pa, pb) = (strength * m, strength * (1.0 - m));
            total +=
                posterity::family::special::ln_beta(pa + a.successes, pb + a.trials - a.successes)
                    - posterity::family::special::ln_beta(pa, pb);
        }
        total
    };
    let at = log_likelihood(s);
    assert!(
        at > log_likelihood(0.8 * s) && at > log_likelihood(1.25 * s),
        "strength {s} is not the peak"
    );
    // Out of fold all the way up, by hand from the counts: a row of fold f reads its
    // region's rows outside f under the region's prior, its district's rows outside f
    // under a prior centred on that (less the district's own rows outside f), and its
    // area's likewise under its district's.
    let ctx = SessionContext::new();
    posterity::register(&ctx);
    let folds: Vec<usize> = {
        let b = ctx
            .sql("SELECT fold_of(value, 5, 0) FROM range(3000) ORDER BY value")
            .await
            .unwrap()
            .collect()
            .await
            .unwrap();
        b.iter()
            .flat_map(|b| b.column(0).as_primitive::<Int64Type>().values().to_vec())
            .map(|f| f as usize)
            .collect()
    };
    let text = std::fs::read_to_string(&train).unwrap();
    let rows: Vec<(String, usize)> = text
        .lines()
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (f[6].to_string(), f[9].parse().unwrap())
        })
        .collect();
    // Successes and trials of the rows whose key starts with `level`, outside fold f.
    let outside = |level: &str, f: usize| {
        let (mut s, mut n) = (0.0, 0.0);
        for (row, (area, y)) in rows.iter().enumerate() {
            if folds[row] != f && area.starts_with(level) {
                (s, n) = (s + *y as f64, n + 1.0);
            }
        }
        (s, n)
    };
    let strength = |key: &str| bundle.columns[key].parent.as_ref().unwrap().1;
    let region_prior = beta(&bundle.columns["region"].prior).prior;
    let (s_district, s_area) = (strength("district"), strength("postcode_area"));
    let (area_means, district_means) = (
        column(&out.join("train_encoded.parquet"), "postcode_area_mean").await,
        column(&out.join("train_encoded.parquet"), "district_mean").await,
    );
    let ids = column(&out.join("train_encoded.parquet"), "appointment_id").await;
    let mut cache = HashMap::new();
    for (row, (area, _)) in rows.iter().enumerate() {
        assert_eq!(ids[row], row as f64, "rows in file order, numbered from 0");
        let f = folds[row];
        let (district_mean, area_mean) = *cache.entry((area.clone(), f)).or_insert_with(|| {
            let (sg, ng) = outside(&area[..3], f);
            let (ga, gb) = (region_prior.a0 + sg, region_prior.b0 + ng - sg);
            let (sd, nd) = outside(&area[..4], f);
            let m = (ga - sd) / (ga + gb - nd);
            let (da, db) = (s_district * m + sd, s_district * (1.0 - m) + nd - sd);
            let (sl, nl) = outside(area, f);
            let m = (da - sl) / (da + db - nl);
            (da / (da + db), (s_area * m + sl) / (s_area + nl))
        });
        assert!(
            (area_means[row] - area_mean).abs() < 1e-12,
            "row {row}: area {} vs {area_mean}",
            area_means[row]
        );
        assert!(
            (district_means[row] - district_mean).abs() < 1e-12,
            "row {row}: district"
        );
    }
    // Unseen areas read their district, an unseen district its region, nothing known
    // the region's prior; a NULL area its district; the bundle scores them alike.
    let scored = dir.join("out/scored.parquet");
    let (area, district, region) = (
        column(&scored, "postcode_area_mean").await,
        column(&scored, "district_mean").await,
        column(&scored, "region_mean").await,
    );
    for (row, parent) in [
        (3000, &district),
        (3001, &region),
        (3002, &region),
        (3003, &district),
    ] {
        assert!(
            (area[row] - parent[row]).abs() < 1e-12,
            "row {row}: {} vs {}",
            area[row],
            parent[row]
        );
    }
    assert!((district[3001] - region[3001]).abs() < 1e-12);
    let rows = rows_of(&scored).await;
    let keys: Vec<usize> = ["postcode_area", "district", "region"]
        .iter()
        .map(|c| rows.schema().index_of(c).unwrap())
        .collect();
    let served = posterity::serve::score(&bundle, &rows.project(&keys).unwrap()).unwrap();
    for name in ["postcode_area_mean", "district_mean", "region_mean"] {
        let (want, got) = (
            rows.column_by_name(name)
                .unwrap()
                .as_primitive::<Float64Type>(),
            served
                .column_by_name(name)
                .unwrap()
                .as_primitive::<Float64Type>(),
        );
        for i in 0..want.len() {
            assert!(
                (want.value(i) - got.value(i)).abs() <= 1e-12 * want.value(i).abs(),
                "{name} row {i}"
            );
        }
    }
    // Parents in a cycle: refused when a bundle is read, and by `score` when one is
    // built by hand (an error, not an endless descent).
    let mut cyclic = bundle.clone();
    cyclic.columns.get_mut("region").unwrap().parent = Some(("postcode_area".into(), 5.0));
    let e = Bundle::from_json(&cyclic.to_json())
        .unwrap_err()
        .to_string();
    assert!(e.contains("own ancestor"), "{e}");
    let e = posterity::serve::score(&cyclic, &rows.project(&keys).unwrap())
        .unwrap_err()
        .to_string();
    assert!(e.contains("cycle"), "{e}");
    // Bad hierarchies are refused by name, before anything is written.
    let base = [
        "encode",
        "--train",
        &train,
        "--target",
        "no_show",
        "--columns",
        "postcode_area,district,region",
    ];
    for (extra, fragments) in [
        (
            vec!["--hierarchy", "postcode_area"],
            vec!["--hierarchy 'postcode_area'", "CHILD>PARENT"],
        ),
        (
            vec!["--hierarchy", "postcode_area>clinic"],
            vec!["'clinic' is not one of --columns"],
        ),
        (
            vec!["--hierarchy", "district>district"],
            vec!["cannot be its own parent"],
        ),
        (
            vec![
                "--hierarchy",
                "district>region",
                "--hierarchy",
                "region>district",
            ],
            vec!["own ancestor"],
        ),
        (
            vec![
                "--hierarchy",
                "postcode_area>district",
                "--hierarchy",
                "postcode_area>region",
            ],
            vec!["two parents", "'district'", "'region'"],
        ),
        (
            vec![
                "--hierarchy",
                "district>region",
                "--treatment",
                "region=levels",
            ],
            vec!["'region' is given as levels"],
        ),
        (
            vec![
                "--hierarchy",
                "district>region",
                "--time-column",
                "day",
                "--time-ties",
                "file-order",
            ],
            vec!["--hierarchy", "--time-ties file-order"],
        ),
    ] {
        let bad = dir.join("bad");
        let mut args: Vec<&str> = base.to_vec();
        args.extend(extra.iter().copied());
        args.extend(["--out", bad.to_str().unwrap()]);
        let o = encode_output(&args);
        let stderr = String::from_utf8_lossy(&o.stderr);
        assert!(!o.status.success() && !bad.exists(), "{extra:?}: {stderr}");
        for f in fragments {
            assert!(stderr.contains(f), "{extra:?}: {stderr}");
        }
    }
    // A refresh of a bundle that does not record its levels' parents (an earlier
    // version's) is refused: it could not recentre them.
    let mut old: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("bundle.json")).unwrap()).unwrap();
    for key in ["postcode_area", "district"] {
        let parent = old["columns"][key]["parent"].as_object_mut().unwrap();
        parent.remove("levels");
        parent.remove("outside");
    }
    let earlier = dir.join("earlier");
    std::fs::create_dir_all(&earlier).unwrap();
    std::fs::write(earlier.join("bundle.json"), old.to_string()).unwrap();
    let o = encode_output(&[
        "encode",
        "--update",
        earlier.to_str().unwrap(),
        "--train",
        &train,
        "--out",
        dir.join("refreshed").to_str().unwrap(),
    ]);
    assert!(
        !o.status.success()
            && String::from_utf8_lossy(&o.stderr).contains("does not record each level's parent"),
        "{o:?}"
    );
}

// A refresh (`--update`) of a bundle encoded under `--hierarchy` pools each level's
// data with the new rows' and centres it anew on its parent's refreshed posterior
// less its own data there, with the stored strength: every level of the refreshed
// bundle against the counts of both halves by hand. A level keeps its stored parent;
// a new level takes the one most of its new rows have; rows under another parent
// (every 50th row sits in district PA99) are its data outside, as recorded.
#[tokio::test]
async fn refresh_recentres_levels_on_their_refreshed_parents() {
    use posterity::layout::AnyPosterior;
    let dir = scratch!("hierarchy-refresh");
    let (crossed, rows) = crossed_sample(&dir);
    let text = std::fs::read_to_string(&crossed).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    let half = 1500;
    let (first, second) = (dir.join("first.csv"), dir.join("second.csv"));
    std::fs::write(&first, format!("{}\n", lines[..=half].join("\n"))).unwrap();
    std::fs::write(
        &second,
        format!("{}\n{}\n", lines[0], lines[half + 1..].join("\n")),
    )
    .unwrap();
    let (before, after) = (dir.join("before"), dir.join("after"));
    encode(&[
        "--train",
        first.to_str().unwrap(),
        "--target",
        "no_show",
        "--columns",
        "postcode_area,district,region",
        "--hierarchy",
        "postcode_area>district>region",
        "--out",
        before.to_str().unwrap(),
    ]);
    encode(&[
        "--update",
        before.to_str().unwrap(),
        "--train",
        second.to_str().unwrap(),
        "--out",
        after.to_str().unwrap(),
    ]);
    let (stored, bundle) = (bundle_in(&before), bundle_in(&after));
    let beta = |p: &AnyPosterior| match p {
        AnyPosterior::Beta(b) => *b,
        other => panic!("{other:?}"),
    };
    // Each child's parent: the stored one, else the most frequent among new rows.
    let parent_of = |child: usize, parent: usize, key: &str| {
        let field = |r: &CrossedRow, f: usize| [&r.0, &r.1, &r.2][f].clone();
        let mut counts: HashMap<(String, String), usize> = HashMap::new();
        for r in &rows[half..] {
            *counts
                .entry((field(r, child), field(r, parent)))
                .or_default() += 1;
        }
        let mut best: HashMap<String, (usize, String)> = HashMap::new();
        for ((c, p), n) in counts {
            let e = best.entry(c).or_insert((0, String::new()));
            if n > e.0 || (n == e.0 && p < e.1) {
                *e = (n, p);
            }
        }
        let mut out: HashMap<String, String> = best.into_iter().map(|(c, (_, p))| (c, p)).collect();
        for (level, (p, _)) in &stored.columns[key].parent_levels {
            out.insert(level.clone(), p.clone());
        }
        out
    };
    let (area_parent, district_parent) = (
        parent_of(0, 1, "postcode_area"),
        parent_of(1, 2, "district"),
    );
    // Successes and trials over both halves of the rows `keep` selects.
    let counts = |keep: &dyn Fn(&CrossedRow) -> bool| {
        rows.iter()
            .filter(|r| keep(r))
            .fold((0.0, 0.0), |(s, n), r| (s + r.4, n + 1.0))
    };
    let check = |key: &str,
                 parent_key: &str,
                 parents: &HashMap<String, String>,
                 child: &dyn Fn(&CrossedRow) -> &String,
                 parent: &dyn Fn(&CrossedRow) -> &String| {
        let (_, strength) = bundle.columns[key].parent.clone().unwrap();
        assert_eq!(
            strength,
            stored.columns[key].parent.as_ref().unwrap().1,
            "{key}: the stored strength"
        );
        for (level, p) in &bundle.columns[key].levels {
            let p = beta(p);
            let (s, n) = counts(&|r| child(r) == level);
            assert_eq!((p.successes, p.trials), (s, n), "{key} {level}: data");
            let main = &parents[level];
            let (sw, nw) = counts(&|r| child(r) == level && parent(r) == main);
            let (pa, pb) = beta(&bundle.columns[parent_key].levels[main]).params();
            let m = (pa - sw) / (pa + pb - nw);
            assert!(
                (p.prior.a0 - strength * m).abs() < 1e-9 * strength,
                "{key} {level}: a0 {} vs {}",
                p.prior.a0,
                strength * m
            );
            assert!(
                (p.prior.b0 - strength * (1.0 - m)).abs() < 1e-9 * strength,
                "{key} {level}: b0"
            );
            let (recorded, outside) = &bundle.columns[key].parent_levels[level];
            assert_eq!(recorded, main, "{key} {level}: parent");
            let outside = outside
                .as_ref()
                .map_or((0.0, 0.0), |o| (beta(o).successes, beta(o).trials));
            assert_eq!(outside, (s - sw, n - nw), "{key} {level}: data outside");
        }
    };
    // The region (no parent) pools its data under its stored prior.
    for (level, p) in &bundle.columns["region"].levels {
        let p = beta(p);
        assert_eq!(
            (p.successes, p.trials),
            counts(&|r| r.2 == *level),
            "region {level}"
        );
        assert_eq!(p.prior, beta(&stored.columns["region"].prior).prior);
    }
    check("district", "region", &district_parent, &|r| &r.1, &|r| &r.2);
    check("postcode_area", "district", &area_parent, &|r| &r.0, &|r| {
        &r.1
    });
    assert!(
        bundle.columns["postcode_area"]
            .parent_levels
            .values()
            .any(|(_, o)| o.is_some()),
        "some areas have rows outside their district"
    );
}

// Options that would write a column carrying nothing: an exceedance threshold outside
// the family's range (every level's probability is 0 or 1) and an interaction of a
// column with itself (the key again). Found by probing the options.
#[test]
fn options_that_carry_nothing_are_refused() {
    let out = scratch!("carry_nothing").join("out");
    let sample = sample();
    let base = [
        "--train",
        &sample,
        "--target",
        "no_show",
        "--columns",
        "breed",
    ];
    for (extra, fragments) in [
        (
            vec!["--readers", "mean,above:1.5"],
            vec!["'above:1.5'", "beta posterior", "strictly between 0 and 1"],
        ),
        (
            vec!["--readers", "above:0"],
            vec!["'above:0'", "strictly between 0 and 1"],
        ),
        (
            vec!["--interactions", "breed:clinic:breed"],
            vec!["--interactions", "'breed:clinic:breed' names 'breed' twice"],
        ),
        // A prior's numbers out of range, in the function's words without the
        // engine's prefix ("Execution error: ").
        (
            vec!["--prior", "0,1"],
            vec!["--prior: beta_prior: argument a = 0 is out of range"],
        ),
    ] {
        let args = [&base[..], &extra, &["--out", out.to_str().unwrap()]].concat();
        let stderr = encode_refusal(&args);
        for f in fragments {
            assert!(stderr.contains(f), "{extra:?}: {stderr}");
        }
        assert!(!stderr.contains("Execution error"), "{extra:?}: {stderr}");
        assert!(!out.exists(), "{extra:?}");
    }
    // Inside the range the reader is written.
    encode(
        &[
            &base[..],
            &["--readers", "above:0.3", "--out", out.to_str().unwrap()],
        ]
        .concat(),
    );
    assert!(out.join("train_encoded.parquet").exists());
}

// An output column named like an input column: a training table with a column of the
// same name, or a file scored before given to --score again (the engine once failed
// with "Schema error: ... ambiguous"). Refused in words, nothing written.
#[tokio::test]
async fn output_names_that_repeat_an_input_column_are_refused() {
    let dir = scratch!("repeated-names");
    let out = dir.join("out");
    let scored_before = dir.join("scored_before.parquet");
    sample_to_parquet(
        "SELECT breed, no_show, 0.5 AS breed_mean FROM a",
        &scored_before,
    )
    .await;
    let sample = sample();
    let scored_before = scored_before.to_str().unwrap();
    for (train, score, expected) in [
        (
            scored_before,
            None,
            "the output column 'breed_mean' of key 'breed' would repeat the training column 'breed_mean'",
        ),
        (
            sample.as_str(),
            Some(scored_before),
            "the output column 'breed_mean' of key 'breed' would repeat the scoring table's column 'breed_mean'",
        ),
    ] {
        let mut args = vec![
            "--train",
            train,
            "--target",
            "no_show",
            "--columns",
            "breed",
            "--out",
            out.to_str().unwrap(),
        ];
        if let Some(score) = score {
            args.extend(["--score", score]);
        }
        let stderr = encode_refusal(&args);
        assert!(stderr.contains(expected), "{stderr}");
        assert!(!out.exists());
    }
}

// An integer key read as floats — what pandas makes of an integer column holding a
// missing value — meets the levels it was trained with, in the scored file and
// through the bundle, and NaN is a NULL key (`key_text`). A bundle written before
// keys were read this way (no "floats" in its key) still reads floats with their
// fraction, as it was trained: "12.0" is not its level "12", so such rows read the prior.
#[tokio::test]
async fn float_keys_meet_their_integer_levels() {
    let dir = scratch!("float-keys");
    let train = dir.join("train.parquet");
    sample_to_parquet(
        "SELECT CAST(day % 40 AS BIGINT) AS slot, no_show FROM a WHERE day < 300",
        &train,
    )
    .await;
    let missing = "appointment_id % 50 = 0";
    let mut scored = Vec::new();
    for (name, slot) in [
        (
            "ints",
            format!("CASE WHEN {missing} THEN NULL ELSE CAST(day % 40 AS BIGINT) END"),
        ),
        (
            "floats",
            format!(
                "CASE WHEN {missing} THEN CAST('NaN' AS DOUBLE) ELSE CAST(day % 40 AS DOUBLE) END"
            ),
        ),
    ] {
        let score = dir.join(format!("{name}.parquet"));
        let select = format!("SELECT {slot} AS slot, no_show FROM a WHERE day >= 300");
        sample_to_parquet(&select, &score).await;
        let out = dir.join(format!("out-{name}"));
        encode(&[
            "--train",
            train.to_str().unwrap(),
            "--target",
            "no_show",
            "--columns",
            "slot",
            "--indicators",
            "0",
            "--score",
            score.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
        ]);
        let file = column(&out.join("scored.parquet"), "slot_mean").await;
        let served = posterity::serve::score(&bundle_in(&out), &rows_of(&score).await).unwrap();
        let served = served
            .column_by_name("slot_mean")
            .unwrap()
            .as_primitive::<Float64Type>()
            .values()
            .to_vec();
        assert_eq!(file, served, "{name}: the bundle scores as the file");
        scored.push((file, out));
    }
    assert_eq!(
        scored[0].0, scored[1].0,
        "float keys read as their integers"
    );
    let levels: std::collections::BTreeSet<u64> = scored[0].0.iter().map(|m| m.to_bits()).collect();
    assert!(levels.len() > 10, "the levels differ: {}", levels.len());

    // The same bundle as an older build wrote it.
    let json = std::fs::read_to_string(scored[1].1.join("bundle.json")).unwrap();
    let old = json.replace(r#""floats": "whole_as_integer","#, "");
    assert_ne!(json, old, "the bundle records how float keys were read");
    let old = Bundle::from_json(&old).unwrap();
    let floats = rows_of(&dir.join("floats.parquet")).await;
    let served = posterity::serve::score(&old, &floats).unwrap();
    let means = served
        .column_by_name("slot_mean")
        .unwrap()
        .as_primitive::<Float64Type>();
    let prior = means.value(0);
    assert!(
        means.values().iter().all(|&m| m == prior),
        "every row reads the prior"
    );
}

// A refresh of a bundle written before whole floats were read as integers: its
// stored levels ("12.0", and "4:12.0|9:clinic_01" in an interaction) meet the new
// rows' keys ("12") as the same levels, and the refresh equals one of the bundle
// this build writes.
#[tokio::test]
async fn refresh_of_an_older_float_keyed_bundle_keeps_its_levels() {
    let dir = scratch!("float-refresh");
    let (old, new) = (dir.join("old.parquet"), dir.join("new.parquet"));
    let slot = "CAST(day % 40 AS DOUBLE) AS slot, clinic, no_show FROM a";
    sample_to_parquet(&format!("SELECT {slot} WHERE day < 200"), &old).await;
    sample_to_parquet(&format!("SELECT {slot} WHERE day >= 200"), &new).await;
    let first = dir.join("first");
    encode(&[
        "--train",
        old.to_str().unwrap(),
        "--target",
        "no_show",
        "--columns",
        "slot",
        "--interactions",
        "slot:clinic",
        "--out",
        first.to_str().unwrap(),
    ]);
    // The same bundle as an older build wrote it: floats with their fraction.
    let mut json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(first.join("bundle.json")).unwrap()).unwrap();
    for (key, column) in json["columns"].as_object_mut().unwrap() {
        column["key"].as_object_mut().unwrap().remove("floats");
        let levels = std::mem::take(column["levels"].as_object_mut().unwrap());
        let old_text = |level: &str| match key.as_str() {
            "slot" => format!("{level}.0"),
            _ => {
                let (slot, clinic) = level.split_once('|').unwrap();
                let slot = slot.split_once(':').unwrap().1;
                format!("{}:{slot}.0|{clinic}", slot.len() + 2)
            }
        };
        *column["levels"].as_object_mut().unwrap() =
            levels.into_iter().map(|(l, p)| (old_text(&l), p)).collect();
    }
    let older = dir.join("older");
    std::fs::create_dir_all(&older).unwrap();
    std::fs::write(older.join("bundle.json"), json.to_string()).unwrap();
    assert!(bundle_in(&older).columns["slot"]
        .levels
        .contains_key("12.0"));

    let mut refreshed = Vec::new();
    for stored in [&first, &older] {
        let out = dir.join(format!("refreshed-{}", refreshed.len()));
        encode(&[
            "--update",
            stored.to_str().unwrap(),
            "--train",
            new.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
        ]);
        refreshed.push(out);
    }
    let (a, b) = (bundle_in(&refreshed[0]), bundle_in(&refreshed[1]));
    for key in ["slot", "slot_x_clinic"] {
        assert!(a.columns[key].levels.len() > 30, "{key}");
        assert_eq!(a.columns[key].levels, b.columns[key].levels, "{key}");
        let name = format!("{key}_mean");
        let file = |out: &Path| out.join(format!("encodings/{key}.parquet"));
        assert_eq!(
            column(&file(&refreshed[0]), &name).await,
            column(&file(&refreshed[1]), &name).await,
            "{key}"
        );
    }
}

// A key of one row per level (an identifier) with a continuous target: nothing tells
// a level from noise, so every level is pooled and the summary says why — and the
// encodings follow the target's units (before, a fixed unit variance made the
// pooling depend on them: none for a target in millions, full for one in millionths).
// A key whose levels are alike in spread but far apart in mean (the variance shape
// at its cap, the mean strength small) is not reported as pooled.
#[tokio::test]
async fn one_row_per_level_and_the_target_s_units() {
    let dir = scratch!("one-row-levels");
    let mut means = Vec::new();
    for scale in [1.0, 1e6, 1e-6] {
        let file = dir.join(format!("train-{scale}.parquet"));
        sample_to_parquet(
            &format!(
                "SELECT appointment_id, clinic, \
                 (day % 17 + appointment_id % 5 + 0.5) * {scale} AS y, \
                 (CAST(substr(clinic, 8) AS DOUBLE) * 10 + \
                  CASE WHEN (appointment_id / 12) % 2 = 0 THEN 1 ELSE -1 END) * {scale} AS spread \
                 FROM a"
            ),
            &file,
        )
        .await;
        let out = dir.join(format!("out-{scale}"));
        encode(&[
            "--train",
            file.to_str().unwrap(),
            "--target",
            "y",
            "--columns",
            "appointment_id,clinic",
            "--out",
            out.to_str().unwrap(),
        ]);
        let summary: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap())
                .unwrap();
        let warnings = |key: &str| -> String {
            summary
                .as_array()
                .unwrap()
                .iter()
                .find(|k| k["key"] == key)
                .unwrap()["warnings"]
                .to_string()
        };
        assert!(
            warnings("appointment_id").contains("no level has more than one row"),
            "{summary}"
        );
        let mut by_key = Vec::new();
        for key in ["appointment_id", "clinic"] {
            let m = column(&out.join("train_encoded.parquet"), &format!("{key}_mean")).await;
            by_key.push(m.iter().map(|v| v / scale).collect::<Vec<_>>());
        }
        means.push(by_key);

        let spread = dir.join(format!("spread-{scale}"));
        encode(&[
            "--train",
            file.to_str().unwrap(),
            "--target",
            "spread",
            "--columns",
            "clinic",
            "--out",
            spread.to_str().unwrap(),
        ]);
        let summary = std::fs::read_to_string(spread.join("summary.json")).unwrap();
        assert!(summary.contains(r#""at_bound": true"#), "{summary}");
        assert!(!summary.contains("pooled"), "{summary}");
    }
    for scaled in &means[1..] {
        for (a, b) in means[0].iter().flatten().zip(scaled.iter().flatten()) {
            assert!((a - b).abs() <= 1e-9 * a.abs().max(1.0), "{a} {b}");
        }
    }
}

// Scored rows that all miss the training levels are more often a key written another
// way (here the clinics upper-cased) than new levels: the run warns, by key.
#[test]
fn scored_keys_that_all_miss_their_levels_are_reported() {
    let dir = scratch!("all-unseen");
    let upper = dir.join("upper.csv");
    let rows = std::fs::read_to_string(sample()).unwrap();
    std::fs::write(&upper, rows.replace("clinic_", "CLINIC_")).unwrap();
    for (score, warned) in [
        (upper.to_str().unwrap().to_string(), true),
        (sample(), false),
    ] {
        let out = dir.join("out");
        let o = encode_output(&[
            "encode",
            "--train",
            &sample(),
            "--target",
            "no_show",
            "--columns",
            "clinic,breed",
            "--score",
            &score,
            "--out",
            out.to_str().unwrap(),
            "--replace",
        ]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        // The summary, warnings included, goes to standard output.
        let printed = String::from_utf8_lossy(&o.stdout);
        let warning = "none of the 3000 scored rows with a clinic has a level seen in training";
        assert_eq!(printed.contains(warning), warned, "{printed}");
        assert!(!printed.contains("with a breed has"), "{printed}");
        let summary = std::fs::read_to_string(out.join("summary.json")).unwrap();
        assert_eq!(summary.contains(warning), warned, "{summary}");
        // The scored rows per key, as a table (unseen_levels.json has the same counts).
        let clinic = printed
            .lines()
            .skip_while(|l| !l.starts_with("key") || !l.contains("unseen levels"))
            .find(|l| l.starts_with("clinic "))
            .unwrap_or_else(|| panic!("no scored table in {printed}"));
        let counts: Vec<&str> = clinic.split_whitespace().skip(1).collect();
        let unseen_rows = if warned { "3000" } else { "0" };
        let levels = if warned { "12" } else { "0" };
        assert_eq!(counts, ["3000", "3000", unseen_rows, levels], "{printed}");
        let json: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(out.join("unseen_levels.json")).unwrap())
                .unwrap();
        assert_eq!(json["clinic"]["unseen_levels"].to_string(), levels);
    }
}

// As-of encodings give a training row only earlier rows, and a scored row every
// training row: scored rows inside the training period read later rows that no
// training row did (a backtest on them scores features its model never saw). The
// summary says how many; scored rows after the training period, and out-of-fold
// encodings, say nothing. Counts against the sample's own days (hand SQL below).
#[tokio::test]
async fn scored_rows_inside_the_training_period_are_counted() {
    let dir = scratch!("scored-inside");
    let (early_train, late_score) = (dir.join("early.parquet"), dir.join("late.parquet"));
    let (most, every_fifth) = (dir.join("most.parquet"), dir.join("fifth.parquet"));
    sample_to_parquet("SELECT * FROM a WHERE day < 300", &early_train).await;
    sample_to_parquet("SELECT * FROM a WHERE day >= 300", &late_score).await;
    sample_to_parquet("SELECT * FROM a WHERE day % 5 <> 0 AND day < 330", &most).await;
    sample_to_parquet("SELECT * FROM a WHERE day % 5 = 0", &every_fifth).await;
    // The fifth days up to 329 (the newest training day), by hand.
    let ctx = SessionContext::new();
    ctx.register_csv("a", &sample(), Default::default())
        .await
        .unwrap();
    let hand = ctx
        .sql("SELECT COUNT(*) FILTER (WHERE day <= 329), COUNT(*) FROM a WHERE day % 5 = 0")
        .await
        .unwrap()
        .collect()
        .await
        .unwrap();
    let count = |c: usize| hand[0].column(c).as_primitive::<Int64Type>().value(0);
    let (inside, all) = (count(0), count(1));
    assert!(0 < inside && inside < all);
    let warning = format!(
        "{inside} of the {all} scored rows are not later in day than the newest training row \
         (329)"
    );
    let dated = format!("{inside} of the {all} scored rows are not later in booked_on");
    // Out-of-fold encodings with a half-life read time only for weights.
    let kfold = ["--method", "kfold", "--half-life", "60"];
    for (train, score, time, method, said) in [
        (&most, &every_fifth, "day", &[][..], Some(&warning)),
        (&most, &every_fifth, "booked_on", &[], Some(&dated)),
        (&most, &every_fifth, "day", &kfold, None),
        (&early_train, &late_score, "day", &[], None),
    ] {
        let out = dir.join("out");
        let o = encode_output(
            &[
                "encode",
                "--train",
                train.to_str().unwrap(),
                "--score",
                score.to_str().unwrap(),
                "--target",
                "no_show",
                "--columns",
                "breed,clinic",
                "--time-column",
                time,
                "--out",
                out.to_str().unwrap(),
                "--replace",
            ]
            .iter()
            .chain(method)
            .copied()
            .collect::<Vec<_>>(),
        );
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let printed = String::from_utf8_lossy(&o.stdout);
        let summary = std::fs::read_to_string(out.join("summary.json")).unwrap();
        match said {
            // Said once, on the first key.
            Some(warning) => {
                assert_eq!(printed.matches(warning.as_str()).count(), 1, "{printed}");
                assert!(summary.contains(warning.as_str()), "{summary}");
            }
            None => assert!(
                !printed.contains("not later in"),
                "{time} {method:?}: {printed}"
            ),
        }
    }
}

// A scoring table without rows (a filter that kept none) is easy to miss as zeros in
// the scored-rows table: the summary says it once.
#[tokio::test]
async fn a_scoring_table_without_rows_is_said() {
    let dir = scratch!("empty-score");
    let (none, some) = (dir.join("none.parquet"), dir.join("some.parquet"));
    sample_to_parquet("SELECT * FROM a WHERE day > 1000", &none).await;
    sample_to_parquet("SELECT * FROM a WHERE day > 300", &some).await;
    for (score, said) in [(&none, 1), (&some, 0)] {
        let out = dir.join("out");
        let o = encode_output(&[
            "encode",
            "--train",
            sample().as_str(),
            "--score",
            score.to_str().unwrap(),
            "--target",
            "no_show",
            "--columns",
            "breed,clinic",
            "--out",
            out.to_str().unwrap(),
            "--replace",
        ]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let printed = String::from_utf8_lossy(&o.stdout);
        let warning = "the scoring table has no rows, so nothing was scored";
        assert_eq!(printed.matches(warning).count(), said, "{printed}");
        let summary = std::fs::read_to_string(out.join("summary.json")).unwrap();
        assert_eq!(summary.matches(warning).count(), said, "{summary}");
    }
}

// A text target of two classes ('no', 'yes': common in open data) is read per class,
// so each reader's two columns add to one; the summary says so once and how to get
// one column per reader. Three classes carry no such warning.
#[tokio::test]
async fn two_text_classes_are_named_as_one_complement_of_the_other() {
    use posterity::encode::{self, EncodeOptions};
    let ctx = SessionContext::new();
    posterity::register(&ctx);
    ctx.sql(
        "CREATE TABLE rows AS SELECT CAST(v % 7 AS VARCHAR) AS clinic, \
         CAST(v % 5 AS VARCHAR) AS breed, \
         CASE WHEN v % 3 = 0 THEN 'yes' ELSE 'no' END AS came, \
         CASE v % 3 WHEN 0 THEN 'kept' WHEN 1 THEN 'missed' ELSE 'moved' END AS outcome \
         FROM generate_series(1, 300) g(v)",
    )
    .await
    .unwrap()
    .collect()
    .await
    .unwrap();
    let warned = |target: &str| {
        let ctx = ctx.clone();
        let target = target.to_string();
        async move {
            let options = EncodeOptions::new("rows", &target, &["clinic", "breed"]);
            let plan = encode::resolve(&ctx, &options).await.unwrap();
            let output = encode::run(&ctx, &plan).await.unwrap();
            let batches = output.train_encoded.unwrap().collect().await.unwrap();
            let names: Vec<String> = batches[0]
                .schema()
                .fields()
                .iter()
                .map(|f| f.name().clone())
                .collect();
            let warnings: Vec<Vec<String>> = output
                .summary
                .iter()
                .map(|s| {
                    s.warnings
                        .iter()
                        .filter(|w| w.contains("two classes"))
                        .cloned()
                        .collect()
                })
                .collect();
            (names, warnings)
        }
    };
    let (names, warnings) = warned("came").await;
    assert!(
        names.contains(&"clinic_no_mean".to_string())
            && names.contains(&"clinic_yes_mean".to_string())
    );
    assert_eq!(warnings[0].len(), 1, "{warnings:?}");
    assert!(warnings[1].is_empty(), "{warnings:?}");
    assert!(
        warnings[0][0].contains("target 'came' has two classes ('no', 'yes')")
            && warnings[0][0].contains("(for example came = 'yes')"),
        "{}",
        warnings[0][0]
    );
    let (_, warnings) = warned("outcome").await;
    assert!(warnings.iter().all(Vec::is_empty), "{warnings:?}");
}

// An integer target is read as counts (the gamma family) unless told otherwise. Test
// scores in the hundreds vary within a level far more than counts of that size
// (variance over mean 1: a Poisson count's dispersion index), so the summary warns
// and names --family nig; counts drawn as Poisson do not warn, nor does a family
// the user chose. Negative integers, refused as counts, say where the family came
// from.
#[tokio::test]
async fn integer_targets_that_are_not_counts_are_named() {
    use posterity::encode::{self, EncodeOptions};
    use posterity::layout::Kind as Family;
    let ctx = SessionContext::new();
    posterity::register(&ctx);
    let mut poisson = String::new();
    let mut state = 11u64;
    for row in 0..2000 {
        // Knuth's multiplication method for a Poisson draw with mean 4 + clinic.
        let clinic = row % 10;
        let limit = (-(4.0 + clinic as f64)).exp();
        let (mut k, mut product) = (0, 1.0);
        loop {
            state = mix64(state);
            product *= uniform(state, &[]);
            if product <= limit {
                break;
            }
            k += 1;
        }
        poisson.push_str(&format!("('c{clinic}', {k}),"));
    }
    for sql in [
        "CREATE TABLE scores AS SELECT 'c' || CAST(v % 10 AS VARCHAR) AS clinic, \
         CAST(300 + (v * 37) % 397 AS BIGINT) AS score, CAST((v * 37) % 97 - 40 AS BIGINT) AS delta \
         FROM generate_series(1, 2000) g(v)"
            .to_string(),
        format!(
            "CREATE TABLE visits AS SELECT * FROM (VALUES {}) t(clinic, visits)",
            poisson.trim_end_matches(',')
        ),
    ] {
        ctx.sql(&sql).await.unwrap().collect().await.unwrap();
    }
    let warnings = |table: &str, target: &str, family: Option<Family>| {
        let ctx = ctx.clone();
        let (table, target) = (table.to_string(), target.to_string());
        async move {
            let mut options = EncodeOptions::new(&table, &target, &["clinic"]);
            options.family = family;
            let plan = encode::resolve(&ctx, &options).await.unwrap();
            let output = encode::run(&ctx, &plan).await.unwrap();
            output.summary[0].warnings.join("\n")
        }
    };
    let w = warnings("scores", "score", None).await;
    assert!(
        w.contains("'score' varies")
            && w.contains("within the levels of clinic")
            && w.contains("--family nig"),
        "{w}"
    );
    assert!(!warnings("scores", "score", Some(Family::Gamma))
        .await
        .contains("varies"));
    let w = warnings("visits", "visits", None).await;
    assert!(!w.contains("varies"), "Poisson counts: {w}");
    let e = encode::resolve(&ctx, &EncodeOptions::new("scores", "delta", &["clinic"]))
        .await
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("counts from 0 to 1e100")
            && e.contains("chosen because 'delta' holds integers")
            && e.contains("--family nig"),
        "{e}"
    );
}

// The summary's rows are rows: the training rows with the key and a target (and an
// exposure). What they weigh in the encodings is said beside them when it differs:
// a half-life decays older rows, and counts weigh their exposure. Before, the summary
// gave the weight under the name rows (18357 rows showed as 2398.35 with a 30-day
// half-life).
#[tokio::test]
async fn the_summary_counts_rows_and_says_what_they_weigh() {
    let dir = scratch!("summary-rows");
    let root = env!("CARGO_MANIFEST_DIR");
    let appointments = format!("{root}/demo/sample/appointments.csv");
    let pets = format!("{root}/demo/sample/pets.csv");
    let ctx = SessionContext::new();
    ctx.register_csv("a", &appointments, Default::default())
        .await
        .unwrap();
    ctx.register_csv("p", &pets, Default::default())
        .await
        .unwrap();
    let hand = |sql: &'static str| {
        let ctx = ctx.clone();
        async move {
            let b = ctx.sql(sql).await.unwrap().collect().await.unwrap();
            let v = |c: usize| {
                datafusion::arrow::compute::cast(b[0].column(c), &DataType::Float64).unwrap()
            };
            (
                v(0).as_primitive::<Float64Type>().value(0),
                v(1).as_primitive::<Float64Type>().value(0),
            )
        }
    };
    let (rows, decayed) = hand(
        "SELECT COUNT(*), SUM(power(0.5, ((SELECT MAX(day) FROM a) - day) / 30.0)) FROM a \
         WHERE breed IS NOT NULL AND no_show IS NOT NULL",
    )
    .await;
    let (pet_rows, exposure) = hand(
        "SELECT COUNT(*), SUM(years_enrolled) FROM p \
         WHERE breed IS NOT NULL AND visits IS NOT NULL AND years_enrolled IS NOT NULL",
    )
    .await;
    let runs = [
        (
            "plain",
            vec!["--train", &appointments, "--target", "no_show"],
            rows,
            rows,
            None,
        ),
        (
            "half-life",
            vec![
                "--train",
                &appointments,
                "--target",
                "no_show",
                "--time-column",
                "day",
                "--half-life",
                "30",
            ],
            rows,
            decayed,
            Some("the half-life decays older rows"),
        ),
        (
            "exposure",
            vec![
                "--train",
                &pets,
                "--target",
                "visits",
                "--exposure",
                "years_enrolled",
            ],
            pet_rows,
            exposure,
            Some("counts weigh their exposure"),
        ),
    ];
    for (name, mut args, want_rows, want_weight, why) in runs {
        let out = dir.join(name);
        let out_arg = out.display().to_string();
        args.insert(0, "encode");
        args.extend(["--columns", "breed", "--out", &out_arg]);
        let o = encode_output(&args);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let printed = String::from_utf8_lossy(&o.stdout).to_string();
        let summary: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap())
                .unwrap();
        assert_eq!(
            summary[0]["rows"].as_u64(),
            Some(want_rows as u64),
            "{name}"
        );
        let weight = summary[0]["weight"].as_f64().unwrap();
        assert!(
            (weight - want_weight).abs() <= 1e-9 * want_weight,
            "{name}: {weight} against {want_weight}"
        );
        let line = printed
            .lines()
            .find(|l| l.starts_with("breed: the encodings hold a weight of "));
        match why {
            Some(why) => assert!(line.is_some_and(|l| l.contains(why)), "{name}: {printed}"),
            None => assert!(line.is_none(), "{name}: {printed}"),
        }
    }
    // A refresh with the same rows again: its rows are the new rows, and the encodings
    // weigh old and new together.
    let (previous, refreshed) = (dir.join("plain"), dir.join("refreshed"));
    let o = encode_output(&[
        "encode",
        "--update",
        previous.to_str().unwrap(),
        "--train",
        &appointments,
        "--out",
        refreshed.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(refreshed.join("summary.json")).unwrap())
            .unwrap();
    assert_eq!(summary[0]["rows"].as_u64(), Some(rows as u64));
    assert_eq!(summary[0]["weight"].as_f64(), Some(2.0 * rows));
    assert!(String::from_utf8_lossy(&o.stdout).contains(&format!(
        "the encodings hold a weight of {} from its {rows} rows (the new rows pooled with the stored posteriors)",
        2.0 * rows
    )));
}

// A target with one value in the training rows (the wrong column, or a filter that
// kept one outcome) is said, for every family whose fit does not say it already;
// a target with two values is not.
#[test]
fn a_target_with_one_value_is_said() {
    let dir = scratch!("one-value");
    let mixed = random_key_csv(&dir, 400, 20);
    let text = std::fs::read_to_string(&mixed).unwrap();
    let same = |value: &str| {
        let mut s = String::from("id,key,t,y\n");
        for line in text.lines().skip(1) {
            let (head, _) = line.rsplit_once(',').unwrap();
            s.push_str(&format!("{head},{value}\n"));
        }
        let path = dir.join(format!("same-{value}.csv"));
        std::fs::write(&path, s).unwrap();
        path.display().to_string()
    };
    let cases = [
        (mixed.clone(), vec![], false),
        (same("0"), vec![], true),
        (same("1"), vec![], true),
        (same("0"), vec!["--family", "gamma"], true),
        (same("missed"), vec![], true),
    ];
    for (i, (train, extra, said)) in cases.into_iter().enumerate() {
        let out = dir.join(format!("out{i}")).display().to_string();
        let mut args = vec![
            "encode",
            "--train",
            &train,
            "--target",
            "y",
            "--columns",
            "key",
            "--out",
            &out,
        ];
        args.extend(extra);
        let o = encode_output(&args);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let printed = String::from_utf8_lossy(&o.stdout).to_string();
        assert_eq!(
            printed.contains("every training row's target y is"),
            said,
            "{train}: {printed}"
        );
    }
}

/// A text input is read once into a Parquet copy in file order, as encode scans its
/// rows once per statement (BENCHMARKS.md). The copy changes no byte of the
/// outputs: a run that cannot write it (its temporary directory is a file) reads
/// the CSV itself and writes the same files. The library's copy holds the same rows
/// in the same order and is removed with its guard.
#[tokio::test]
async fn text_inputs_are_read_through_a_parquet_copy() {
    use datafusion::arrow::util::pretty::pretty_format_batches;
    use datafusion::prelude::SessionConfig;
    let dir = scratch!("columnar-copy");
    let sample = sample();
    let blocked = dir.join("a-file-not-a-directory");
    std::fs::write(&blocked, "").unwrap();
    let mut written = Vec::new();
    for (name, temporary) in [("copied", None), ("read", Some(&blocked))] {
        let out = dir.join(name);
        let mut run = Command::new(env!("CARGO_BIN_EXE_posterity"));
        run.args(["encode", "--train", &sample, "--target", "no_show"])
            .args(["--columns", "breed,vet", "--time-column", "booked_on"])
            .args(["--score", &sample, "--out", out.to_str().unwrap()]);
        if let Some(t) = temporary {
            run.env("TMPDIR", t);
        }
        let o = run.output().unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        written.push(
            ["train_encoded.parquet", "scored.parquet", "bundle.json"]
                .map(|f| std::fs::read(out.join(f)).unwrap()),
        );
    }
    assert!(written[0] == written[1], "the copy changed the outputs");

    let ctx = SessionContext::new_with_config(SessionConfig::new().with_target_partitions(1));
    let csv = posterity::files::CsvOptions::default();
    posterity::files::register(&ctx, "rows", &sample, &csv)
        .await
        .unwrap();
    let shown = || async {
        let rows = ctx.sql("SELECT * FROM rows").await.unwrap();
        pretty_format_batches(&rows.collect().await.unwrap())
            .unwrap()
            .to_string()
    };
    let before = shown().await;
    let copy = posterity::columnar_copy::replace_text_table(&ctx, "rows", &sample)
        .await
        .expect("a CSV file is copied");
    let file = copy.path().to_path_buf();
    assert!(file.exists());
    assert_eq!(
        shown().await,
        before,
        "the copy's rows differ from the file's"
    );
    drop(copy);
    assert!(!file.exists(), "the copy outlived its guard");
}
