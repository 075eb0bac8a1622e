//! `posterity demo`: generates the invented veterinary-clinics scenario from a
//! seed, writes it as CSV and Parquet, and tells the whole job in SQL.
//! No real clinic, person or place appears: every name is a generated code.

use std::fmt::Write as _;
use std::path::Path;

use crate::family::rng::SplitMix;

use super::{Failure, Shell};

fn zipf(levels: usize, s: f64) -> Vec<f64> {
    let mut acc = 0.0;
    (1..=levels)
        .map(|r| {
            acc += 1.0 / (r as f64).powf(s);
            acc
        })
        .collect()
}

fn date(day: i64) -> String {
    // Civil date from days since 2025-01-01 (H. Hinnant's algorithm).
    let z = day + 20089 + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!("{y:04}-{m:02}-{d:02}")
}

/// Write the scenario's CSV files into `dir`.
pub fn generate(dir: &Path, rows: usize, seed: u64) -> std::io::Result<()> {
    std::fs::create_dir_all(dir)?;
    let mut g = SplitMix(seed);
    let (n_breeds, n_areas, n_vets, n_clinics) = (300, 3000, 60, 12);
    let breed_effect: Vec<f64> = (0..n_breeds).map(|_| 0.45 * g.normal()).collect();
    let area_effect: Vec<f64> = (0..n_areas).map(|_| 0.6 * g.normal()).collect();
    let vet_fee: Vec<f64> = (0..n_vets).map(|_| 85.0 + 15.0 * g.normal()).collect();
    let breed_visit_rate: Vec<f64> = (0..n_breeds)
        .map(|_| 2.0 * (0.3 * g.normal()).exp())
        .collect();
    let channels = ["phone", "web", "walk_in", "partner_referral", "app"];
    let channel_effect = [0.0, 0.2, -0.5, 0.4, 0.1];
    let (breed_w, area_w) = (zipf(n_breeds, 1.1), zipf(n_areas, 1.05));

    let mut truth = String::from("breed,true_no_show_rate,true_visit_rate\n");
    for b in 0..n_breeds {
        let p = 1.0 / (1.0 + (-(-2.3 + breed_effect[b])).exp());
        writeln!(truth, "breed_{b:03},{p:.6},{:.6}", breed_visit_rate[b]).ok();
    }
    std::fs::write(dir.join("breed_truth.csv"), truth)?;

    let mut out = String::with_capacity(rows * 120);
    out.push_str("appointment_id,booked_on,day,clinic,channel,breed,postcode_area,vet,outcome,no_show,amount\n");
    for id in 0..rows {
        let day = ((id as f64 / rows as f64) * 365.0) as i64;
        let b = g.pick(&breed_w);
        // The last month brings postcode areas never seen before.
        let area = if day >= 335 && g.unit() < 0.1 {
            format!("PN{:04}", g.pick(&area_w[..500]))
        } else {
            format!("PA{:04}", g.pick(&area_w))
        };
        let a_eff = if area.starts_with("PN") {
            0.0
        } else {
            area_effect[area[2..].parse::<usize>().unwrap_or(0)]
        };
        let c = g.pick(&[1.0, 2.0, 3.0, 3.5, 4.0]);
        let vet = (id * 7 + b) % n_vets;
        let logit = -2.3 + breed_effect[b] + a_eff + channel_effect[c];
        let p_no_show = 1.0 / (1.0 + (-logit).exp());
        let u = g.unit();
        let outcome = if u < p_no_show {
            "no_show"
        } else if u < p_no_show + 0.06 {
            "late_cancellation"
        } else if u < p_no_show + 0.11 {
            "rescheduled"
        } else {
            "attended"
        };
        let amount = if outcome == "attended" {
            format!("{:.2}", (vet_fee[vet] * (0.25 * g.normal()).exp()).max(5.0))
        } else {
            String::new()
        };
        writeln!(
            out,
            "{id},{},{day},clinic_{:02},{},breed_{b:03},{area},vet_{vet:02},{outcome},{},{amount}",
            date(day),
            id % n_clinics,
            channels[c],
            u8::from(outcome == "no_show")
        )
        .ok();
    }
    std::fs::write(dir.join("appointments.csv"), out)?;

    let mut pets = String::from("pet_id,breed,years_enrolled,visits\n");
    for pet in 0..(rows / 10).max(100) {
        let b = g.pick(&breed_w);
        let years = 0.25 + 4.75 * g.unit();
        let visits = g.poisson(breed_visit_rate[b] * years);
        writeln!(pets, "{pet},breed_{b:03},{years:.3},{visits}").ok();
    }
    std::fs::write(dir.join("pets.csv"), pets)
}

/// The demo's story: each step a heading, a sentence and a query.
const STORY: &[(&str, &str)] = &[
    ("Parquet copies of the generated files", "
COPY (SELECT * FROM appointments_csv ORDER BY appointment_id) TO '{dir}/appointments.parquet' STORED AS PARQUET;
COPY (SELECT * FROM pets_csv ORDER BY pet_id) TO '{dir}/pets.parquet' STORED AS PARQUET;
CREATE EXTERNAL TABLE appointments STORED AS PARQUET LOCATION '{dir}/appointments.parquet';
CREATE EXTERNAL TABLE pets STORED AS PARQUET LOCATION '{dir}/pets.parquet';
COPY (SELECT * FROM appointments WHERE day < 335 ORDER BY appointment_id) TO '{dir}/train.parquet' STORED AS PARQUET;
COPY (SELECT * FROM appointments WHERE day >= 335 ORDER BY appointment_id) TO '{dir}/next_month.parquet' STORED AS PARQUET;
SELECT COUNT(*) AS appointments, COUNT(DISTINCT breed) AS breeds, COUNT(DISTINCT postcode_area) AS postcode_areas,
       round(AVG(no_show), 4) AS no_show_rate FROM appointments"),
    ("1. A prior centred on the base rate, then one posterior per breed (Beta family)", "
CREATE TABLE breed_enc AS
SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM appointments WHERE day < 335 GROUP BY breed;
SELECT breed, posterior_data_weight(p) AS bookings, round(posterior_mean(p), 4) AS mean,
       round(posterior_interval(p, 0.9)['lower'], 4) AS lower_90, round(posterior_interval(p, 0.9)['upper'], 4) AS upper_90,
       round(posterior_prob_above(p, 0.12), 3) AS p_above_12pct
FROM breed_enc ORDER BY posterior_quantile(p, 0.05) DESC LIMIT 5"),
    ("2. Breeds we are surest are low-risk (highest 95% quantile is still small)", "
SELECT breed, posterior_data_weight(p) AS bookings, round(posterior_mean(p), 4) AS mean,
       round(posterior_quantile(p, 0.95), 4) AS upper_95
FROM breed_enc WHERE posterior_data_weight(p) > 0 ORDER BY posterior_quantile(p, 0.95) LIMIT 5"),
    ("3. Rare postcode areas are shrunk toward the prior; raw rates are not", "
SELECT postcode_area, COUNT(*) AS bookings, SUM(no_show) AS no_shows, round(AVG(no_show), 3) AS raw_rate,
       round(posterior_mean(beta_posterior(no_show, beta_prior(2, 18))), 3) AS posterior_mean
FROM appointments WHERE day < 335 GROUP BY postcode_area HAVING COUNT(*) <= 2 AND SUM(no_show) >= 1
ORDER BY postcode_area LIMIT 5"),
    ("4. Scoring the last month: unseen postcode areas get the prior", "
CREATE TABLE area_enc AS
SELECT postcode_area, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM appointments WHERE day < 335 GROUP BY postcode_area;
SELECT e.p IS NULL AS unseen_area, COUNT(*) AS bookings,
       round(AVG(posterior_mean(COALESCE(e.p, beta_prior(2, 18)))), 4) AS mean_encoding
FROM appointments a LEFT JOIN area_enc e USING (postcode_area) WHERE a.day >= 335 GROUP BY e.p IS NULL ORDER BY 1"),
    ("5. The leak: in-sample encodings correlate with their own target; out-of-fold ones are honest", "
WITH f AS (SELECT *, fold_of(appointment_id, 5) AS fold FROM appointments),
total AS (SELECT postcode_area, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM f GROUP BY postcode_area),
per_fold AS (SELECT postcode_area, fold, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM f GROUP BY postcode_area, fold),
enc AS (SELECT f.no_show, posterior_mean(t.p) AS in_sample, posterior_mean(posterior_subtract(t.p, k.p)) AS out_of_fold
        FROM f JOIN total t USING (postcode_area) JOIN per_fold k ON k.postcode_area = f.postcode_area AND k.fold = f.fold)
SELECT round(corr(in_sample, no_show), 4) AS corr_in_sample, round(corr(out_of_fold, no_show), 4) AS corr_out_of_fold FROM enc"),
    ("6. Recovered vs true breed rates (the generator's truth)", "
SELECT round(corr(posterior_mean(e.p), t.true_no_show_rate), 3) AS corr_posterior_vs_truth,
       round(AVG(CASE WHEN t.true_no_show_rate BETWEEN posterior_interval(e.p, 0.9)['lower'] AND posterior_interval(e.p, 0.9)['upper'] THEN 1.0 ELSE 0.0 END), 3) AS coverage_of_90pct_intervals
FROM breed_enc e JOIN breed_truth t USING (breed)"),
    ("7. All four families: outcome classes per clinic (Dirichlet)", "
SELECT clinic, round(posterior_mean(p, 'no_show'), 4) AS no_show, round(posterior_mean(p, 'late_cancellation'), 4) AS late_cancellation,
       round(posterior_mean(p, 'rescheduled'), 4) AS rescheduled
FROM (SELECT clinic, dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show', 'late_cancellation', 'rescheduled'], 1)) AS p
      FROM appointments GROUP BY clinic) ORDER BY clinic LIMIT 4"),
    ("8. Invoice amount per vet (Normal-Inverse-Gamma, Student-t marginal)", "
SELECT vet, posterior_data_weight(p) AS invoices, round(posterior_mean(p), 2) AS mean_amount,
       round(posterior_interval(p, 0.95)['lower'], 2) AS lower_95, round(posterior_interval(p, 0.95)['upper'], 2) AS upper_95
FROM (SELECT vet, nig_posterior(amount, nig_prior(80, 1, 2, 500)) AS p FROM appointments GROUP BY vet)
ORDER BY posterior_mean(p) DESC LIMIT 4"),
    ("9. Visits per year enrolled per breed (Gamma-Poisson), against the truth", "
SELECT round(corr(posterior_mean(p), t.true_visit_rate), 3) AS corr_posterior_vs_truth, COUNT(*) AS breeds
FROM (SELECT breed, gamma_posterior(visits, years_enrolled, gamma_prior(2, 1)) AS p FROM pets GROUP BY breed) e
JOIN breed_truth t USING (breed)"),
    ("10. A prior fitted from the data beats fixed priors on next month's bookings (log-loss, lower is better)", "
CREATE TABLE area_fit AS SELECT postcode_area, beta_posterior(no_show) AS p FROM appointments WHERE day < 300 GROUP BY postcode_area;
CREATE TABLE area_prior AS SELECT fit_prior(p) AS prior FROM area_fit;
SELECT round(posterior_mean(prior), 4) AS fitted_prior_mean FROM area_prior;
WITH s AS (SELECT a.no_show AS y,
       posterior_mean(COALESCE(f.p, beta_prior(0.5, 0.5))) AS jeffreys,
       posterior_mean(COALESCE(posterior_with_prior(f.p, beta_prior(1, 1)), beta_prior(1, 1))) AS uniform,
       posterior_mean(COALESCE(posterior_with_prior(f.p, q.prior), q.prior)) AS fitted
     FROM appointments a LEFT JOIN area_fit f USING (postcode_area) CROSS JOIN area_prior q WHERE a.day >= 300)
SELECT round(-AVG(y * ln(jeffreys) + (1 - y) * ln(1 - jeffreys)), 4) AS jeffreys_prior,
       round(-AVG(y * ln(uniform) + (1 - y) * ln(1 - uniform)), 4) AS uniform_prior,
       round(-AVG(y * ln(fitted) + (1 - y) * ln(1 - fitted)), 4) AS fitted_prior FROM s"),
];

/// Generate the data and tell the story.
/// Fewer rows leave the story's months and clinics empty.
const MIN_ROWS: usize = 1000;

pub async fn run(shell: &Shell, dir: &Path, rows: usize, seed: u64) -> Result<(), Failure> {
    if rows < MIN_ROWS {
        return Err(Failure::usage(format!(
            "demo --rows {rows} is too few: the story needs at least {MIN_ROWS} appointments \
             (a year of bookings across the clinics)"
        )));
    }
    generate(dir, rows, seed)
        .map_err(|e| Failure::query(format!("cannot write demo data to {}: {e}", dir.display())))?;
    let d = dir.display().to_string();
    println!("Generated {rows} invented appointments (seed {seed}) in {d}\n");
    for (name, file) in [
        ("appointments_csv", "appointments.csv"),
        ("pets_csv", "pets.csv"),
        ("breed_truth", "breed_truth.csv"),
    ] {
        shell.register_table(&format!("{name}={d}/{file}")).await?;
    }
    for (title, sql) in STORY {
        println!("== {title}");
        shell.run_script(&sql.replace("{dir}", &d), "demo").await?;
        println!();
    }
    println!("== 11. One command: leak-free training encodings, encoding tables, a serving bundle, a scored month and a report");
    // The demo's encode is the command a user would type (so it keeps every default).
    let out = dir.join("encoded");
    let encode = super::encode::EncodeArgs::from_words(&[
        "--train",
        &format!("{d}/train.parquet"),
        "--target",
        "no_show",
        "--columns",
        "breed,postcode_area,vet",
        "--interactions",
        "breed:clinic",
        "--readers",
        "mean,sd,q05",
        "--score",
        &format!("{d}/next_month.parquet"),
        "--out",
        &out.to_string_lossy(),
        "--replace",
        "--report",
    ])?;
    super::encode::run(shell, &encode).await?;
    println!(
        "(pictures of every encoded column: {})",
        out.join("report.html").display()
    );
    println!("(the same SQL by hand: the files under sql/; see the README)\n");
    println!("Cautions: postcode-area encodings can carry protected characteristics by proxy; a score built on them that\n\
              decides about people falls under local law on automated decisions and fair treatment. Intervals describe\n\
              sampling uncertainty under the model, not data quality or drift.");
    Ok(())
}
