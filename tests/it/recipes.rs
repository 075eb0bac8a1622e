//! Every SQL recipe under sql/ runs against the committed demo sample, and its
//! key results are checked against independent computations.

use std::path::PathBuf;
use std::process::Command;

fn run_recipe(name: &str) -> (PathBuf, Vec<Vec<String>>) {
    let dir = scratch!(name);
    let root = env!("CARGO_MANIFEST_DIR");
    let o = Command::new(env!("CARGO_BIN_EXE_posterity"))
        .current_dir(&dir)
        .args([
            "--format",
            "csv",
            "-t",
            &format!("appointments={root}/demo/sample/appointments.csv"),
        ])
        .args(["-f", &format!("{root}/sql/{name}.sql")])
        .output()
        .unwrap();
    assert!(
        o.status.success(),
        "{name}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    let rows = String::from_utf8_lossy(&o.stdout)
        .lines()
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect();
    (dir, rows)
}

/// The value under `header` in the first data row following that header line.
fn value(rows: &[Vec<String>], header: &str) -> f64 {
    let i = rows
        .iter()
        .position(|r| r.iter().any(|c| c == header))
        .unwrap_or_else(|| panic!("no {header} in {rows:?}"));
    let col = rows[i].iter().position(|c| c == header).unwrap();
    rows[i + 1][col].parse().unwrap()
}

fn query(dir: &PathBuf, sql: &str) -> Vec<Vec<String>> {
    let root = env!("CARGO_MANIFEST_DIR");
    let o = Command::new(env!("CARGO_BIN_EXE_posterity"))
        .current_dir(dir)
        .args([
            "--format",
            "csv",
            "-t",
            &format!("appointments={root}/demo/sample/appointments.csv"),
            "-c",
            sql,
        ])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    String::from_utf8_lossy(&o.stdout)
        .lines()
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect()
}

#[test]
fn encoding_tables() {
    let (dir, _) = run_recipe("01_encoding_tables");
    // Beta(2, 18) posterior mean = (2 + no-shows) / (20 + bookings), from plain SUM/COUNT.
    let rows = query(&dir, "SELECT MAX(ABS(e.no_show_mean - (2.0 + c.s) / (20.0 + c.n))) AS d FROM 'breed_enc.parquet' e JOIN (SELECT breed, SUM(no_show) AS s, COUNT(*) AS n FROM appointments GROUP BY breed) c USING (breed)");
    assert!(value(&rows, "d") < 1e-15);
    assert!(dir.join("area_enc.parquet").exists());
}

#[test]
fn out_of_fold_and_leave_one_out() {
    let (_, rows) = run_recipe("02_out_of_fold");
    assert!(value(&rows, "corr_out_of_fold") < value(&rows, "corr_in_sample"));
    let (_, rows) = run_recipe("03_leave_one_out");
    assert_eq!(value(&rows, "rows"), 3000.0);
}

#[test]
fn as_of_and_scoring_view() {
    let (dir, rows) = run_recipe("04_as_of");
    assert!(value(&rows, "corr_as_of").abs() < 0.1);
    // Pooled per day with posterior_pool_before: the per-row frame's numbers.
    assert!(value(&rows, "pooled_days_difference") < 1e-15, "{rows:?}");
    // Independent computation with plain SUM/COUNT over strictly earlier days: the
    // Beta(2, 18) posterior mean is (2 + no-shows) / (20 + bookings), and a breed's
    // first day gets the prior mean 0.1 (it got 0.5 before the prior was bound).
    let so_far = |window: &str| {
        format!(
            "COPY (SELECT appointment_id, breed, day, no_show, posterior_mean(beta_posterior(no_show, beta_prior(2, 18)) OVER (PARTITION BY breed ORDER BY day RANGE BETWEEN {window} AND 1 PRECEDING)) AS m FROM appointments) TO 'as_of_{}.parquet'",
            window.len()
        )
    };
    query(&dir, &so_far("UNBOUNDED PRECEDING"));
    query(&dir, &so_far("30 PRECEDING"));
    for (file, lower) in [
        ("as_of_19.parquet", "-1e9"),
        ("as_of_12.parquet", "a.day - 30"),
    ] {
        let rows = query(
            &dir,
            &format!(
                "SELECT MAX(ABS(m - (2.0 + s) / (20.0 + n))) AS d, \
                 COUNT(*) FILTER (WHERE n = 0 AND m = 0.1) AS first_rows, \
                 COUNT(*) FILTER (WHERE n = 0) AS empty_frames \
                 FROM (SELECT a.appointment_id, a.m, COALESCE(SUM(b.no_show), 0) AS s, COUNT(b.no_show) AS n \
                 FROM '{file}' a LEFT JOIN appointments b ON b.breed = a.breed AND b.day < a.day \
                 AND b.day >= {lower} GROUP BY a.appointment_id, a.m)"
            ),
        );
        assert!(value(&rows, "d") < 1e-15, "{file}: {rows:?}");
        assert!(value(&rows, "empty_frames") > 0.0);
        assert_eq!(value(&rows, "first_rows"), value(&rows, "empty_frames"));
    }
    let (_, rows) = run_recipe("05_scoring_view");
    // Unseen postcode areas get exactly the prior mean 2 / 20.
    let unseen = rows
        .iter()
        .find(|r| r.first().map(String::as_str) == Some("true"))
        .unwrap();
    assert_eq!(unseen[2], "0.1");
}

#[test]
fn incremental_refresh_equals_full_refit() {
    let (_, rows) = run_recipe("06_incremental_refresh");
    assert!(value(&rows, "max_difference_to_full_refit") < 1e-12);
    assert!(value(&rows, "max_difference_decayed") < 1e-12);
}

#[test]
fn interactions_classes_hierarchy_and_fitted_prior() {
    let (_, rows) = run_recipe("07_interactions_and_classes");
    let header = rows
        .iter()
        .position(|r| r.contains(&"clinic_attended".to_string()))
        .unwrap();
    let sum: f64 = rows[header + 1][2..6]
        .iter()
        .map(|v| v.parse::<f64>().unwrap())
        .sum();
    assert!((sum - 1.0).abs() < 1e-12, "class means sum to one");
    let (_, rows) = run_recipe("08_hierarchy");
    // Each layer's fitted strength is a number of pseudo-observations in the search's
    // range; the demo's districts do not differ from their regions (pooled completely,
    // near the top of the range), its areas do (a few dozen).
    let area_strength = value(&rows, "area_strength");
    assert!((1.0..1000.0).contains(&area_strength), "{area_strength}");
    assert!(value(&rows, "district_strength") > 1e5);
    // An area with one booking sits close to its district (dozens of pseudo-observations of it).
    let area = value(&rows, "area");
    let district = value(&rows, "district");
    assert!((area - district).abs() < 0.02, "{area} vs {district}");
    let (_, rows) = run_recipe("09_fitted_prior");
    let prior_mean = value(&rows, "prior_mean");
    assert!(prior_mean > 0.05 && prior_mean < 0.2, "{prior_mean}");
}
