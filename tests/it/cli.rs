//! The built `posterity` binary on small committed files.

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_posterity"))
}

fn data(name: &str) -> String {
    format!("{}/tests/data/{name}", env!("CARGO_MANIFEST_DIR"))
}

fn run(args: &[&str]) -> Output {
    bin().args(args).output().expect("run posterity")
}

fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).to_string()
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).to_string()
}

const FIT: &str = "SELECT breed, posterior_mean(beta_posterior(no_show, beta_prior(1, 1))) AS m FROM s GROUP BY breed ORDER BY breed";

#[test]
fn command_flag_csv_output() {
    let o = run(&[
        "--table",
        &format!("s={}", data("small.csv")),
        "--csv-null",
        "NA",
        "--format",
        "csv",
        "-c",
        FIT,
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    // beagle: 1 of 2 with a uniform prior -> 2/4; boxer 1 of 1 -> 2/3; poodle 0 of 2 -> 1/4.
    assert_eq!(
        stdout(&o),
        "breed,m\nbeagle,0.5\nboxer,0.6666666666666666\npoodle,0.25\n"
    );
}

#[test]
fn json_ndjson_tsv_and_table_formats() {
    let table = format!("s={}", data("small.csv"));
    let o = run(&[
        "-t",
        &table,
        "--csv-null",
        "NA",
        "--format",
        "json",
        "-c",
        FIT,
    ]);
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).expect("valid JSON");
    assert_eq!(v[2]["breed"], "poodle");
    assert_eq!(v[2]["m"].as_f64(), Some(0.25));
    let o = run(&[
        "-t",
        &table,
        "--csv-null",
        "NA",
        "--format",
        "ndjson",
        "-c",
        FIT,
    ]);
    let lines: Vec<serde_json::Value> = stdout(&o)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert_eq!(lines.len(), 3);
    assert_eq!(lines[0]["m"].as_f64(), Some(0.5));
    let o = run(&[
        "-t",
        &table,
        "--csv-null",
        "NA",
        "--format",
        "tsv",
        "-c",
        FIT,
    ]);
    assert!(
        stdout(&o).starts_with("breed\tm\nbeagle\t0.5\n"),
        "{}",
        stdout(&o)
    );
    let o = run(&["-t", &table, "--csv-null", "NA", "-c", FIT]);
    assert!(stdout(&o).contains("| beagle | 0.5"), "{}", stdout(&o));
    // Posterior structs render as JSON objects.
    let o = run(&[
        "-t",
        &table,
        "--csv-null",
        "NA",
        "--format",
        "json",
        "-c",
        "SELECT beta_posterior(no_show) AS p FROM s",
    ]);
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert_eq!(v[0]["p"]["trials"].as_f64(), Some(5.0));
    assert_eq!(v[0]["p"]["successes"].as_f64(), Some(2.0));
}

#[test]
fn script_file_and_stdin() {
    let dir = scratch!("script");
    let script = dir.join("fit.sql");
    std::fs::write(
        &script,
        format!(
            "-- fit and read; two statements\nCREATE EXTERNAL TABLE s STORED AS CSV LOCATION '{}' OPTIONS ('format.null_regex' '^NA$');\n/* the fit */ {FIT};\n",
            data("small.csv")
        ),
    )
    .unwrap();
    let o = run(&["--format", "csv", "-f", script.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stdout(&o).contains("poodle,0.25"));
    // A script saved with a byte-order mark and Windows line ends runs the same.
    let windows = dir.join("windows.sql");
    let text = std::fs::read_to_string(&script)
        .unwrap()
        .replace('\n', "\r\n");
    std::fs::write(&windows, format!("\u{feff}{text}")).unwrap();
    let o = run(&["--format", "csv", "-f", windows.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stdout(&o).contains("poodle,0.25"));
    let mut child = bin()
        .args(["--format", "csv", "-t", &format!("s={}", data("small.csv"))])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    use std::io::Write;
    child
        .stdin
        .take()
        .unwrap()
        .write_all(b"SELECT COUNT(*) AS n FROM s;\nSELECT 1 + 1 AS two;")
        .unwrap();
    let o = child.wait_with_output().unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(stdout(&o), "n\n5\ntwo\n2\n");
    // SQL pasted with a leading `--` comment is SQL, not an option.
    let o = run(&["--format", "csv", "-c", "-- how many\nSELECT 1 + 1 AS two"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(stdout(&o), "two\n2\n");
}

#[test]
fn tables_from_directory_and_glob() {
    for path in [data("daily"), format!("{}/*.csv", data("daily"))] {
        let o = run(&[
            "--format",
            "csv",
            "-t",
            &format!("d={path}"),
            "-c",
            "SELECT COUNT(*) AS n, SUM(no_show) AS s FROM d",
        ]);
        assert!(o.status.success(), "{path}: {}", stderr(&o));
        assert_eq!(stdout(&o), "n,s\n4,2\n");
    }
}

/// Runs posterity and returns its output with the directory where it kept copies of
/// input files (named by the child's process id), which must be gone when it ends.
fn run_and_temporaries(args: &[&str]) -> (Output, PathBuf) {
    let child = bin()
        .args(args)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("run posterity");
    let copies = std::env::temp_dir().join(format!("posterity-{}", child.id()));
    (child.wait_with_output().unwrap(), copies)
}

#[test]
fn gzip_files_read_like_the_files_inside() {
    use std::io::Write as _;
    let dir = scratch!("gzip");
    let plain = std::fs::read(data("small.csv")).unwrap();
    let gz = dir.join("small.csv.gz");
    let mut encoder =
        flate2::write::GzEncoder::new(std::fs::File::create(&gz).unwrap(), Default::default());
    encoder.write_all(&plain).unwrap();
    encoder.finish().unwrap();
    let fit = |path: &str| {
        run_and_temporaries(&[
            "--table",
            &format!("s={path}"),
            "--csv-null",
            "NA",
            "--format",
            "csv",
            "-c",
            FIT,
        ])
    };
    let (expected, _) = fit(&data("small.csv"));
    let (o, copies) = fit(&gz.display().to_string());
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(stdout(&o), stdout(&expected));
    assert!(!copies.exists(), "{} left behind", copies.display());

    // A truncated gzip file: refused with its own name, not the copy's.
    let bytes = std::fs::read(&gz).unwrap();
    let cut = dir.join("cut.csv.gz");
    std::fs::write(&cut, &bytes[..bytes.len() / 2]).unwrap();
    let (o, copies) = fit(&cut.display().to_string());
    assert_eq!(o.status.code(), Some(1));
    assert!(
        stderr(&o).contains(&format!("{} is not a complete gzip file", cut.display())),
        "{}",
        stderr(&o)
    );
    assert!(!copies.exists());
    // A directory of gzip parts, as exports write them (`_SUCCESS` markers skipped):
    // read like the directory of the files inside.
    let parts = dir.join("parts");
    std::fs::create_dir_all(&parts).unwrap();
    let text = String::from_utf8(plain.clone()).unwrap();
    let (header, rows) = text.split_once('\n').unwrap();
    let rows: Vec<&str> = rows.lines().collect();
    for (i, half) in rows.chunks(rows.len().div_ceil(2)).enumerate() {
        let mut encoder = flate2::write::GzEncoder::new(
            std::fs::File::create(parts.join(format!("part-{i}.csv.gz"))).unwrap(),
            Default::default(),
        );
        encoder
            .write_all(format!("{header}\n{}\n", half.join("\n")).as_bytes())
            .unwrap();
        encoder.finish().unwrap();
    }
    std::fs::write(parts.join("_SUCCESS"), "").unwrap();
    let (o, copies) = fit(&parts.display().to_string());
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(stdout(&o), stdout(&expected));
    assert!(!copies.exists());
    // Plain files beside gzip files: the listing would read only the plain ones.
    std::fs::copy(data("small.csv"), parts.join("more.csv")).unwrap();
    let (o, _) = fit(&parts.display().to_string());
    assert!(
        stderr(&o).contains("holds both gzip and uncompressed data files"),
        "{}",
        stderr(&o)
    );
    // A gzip file whose name does not say what is inside.
    let odd = dir.join("small.gz");
    std::fs::copy(&gz, &odd).unwrap();
    let (o, _) = fit(&odd.display().to_string());
    assert!(stderr(&o).contains("name it .csv.gz"), "{}", stderr(&o));
}

#[test]
fn partitioned_directories_give_their_path_columns() {
    // A dataset written partitioned by value (breed=beagle/part-0.csv, as Spark,
    // pyarrow and polars write them) reads with the path's column, as text; CSV and
    // Parquet, with and without a NULL marker, give the numbers of the flat file.
    let dir = scratch!("partitioned");
    let text = std::fs::read_to_string(data("small.csv")).unwrap();
    let csv_dir = dir.join("csv");
    for line in text.lines().skip(1) {
        let (breed, rest) = line.split_once(',').unwrap();
        let part = csv_dir.join(format!("breed={breed}"));
        std::fs::create_dir_all(&part).unwrap();
        let file = part.join("part-0.csv");
        let mut body = std::fs::read_to_string(&file).unwrap_or("no_show,amount\n".into());
        body.push_str(&format!("{rest}\n"));
        std::fs::write(&file, body).unwrap();
    }
    std::fs::write(csv_dir.join("_SUCCESS"), "").unwrap();
    let fit = |path: &Path, null: bool| {
        let table = format!("s={}", path.display());
        let mut args = vec!["--table", &table, "--format", "csv", "-c", FIT];
        if null {
            args.extend(["--csv-null", "NA"]);
        }
        run(&args)
    };
    let expected = stdout(&fit(Path::new(&data("small.csv")), true));
    for null in [true, false] {
        let o = fit(&csv_dir, null);
        assert!(o.status.success(), "{}", stderr(&o));
        assert_eq!(stdout(&o), expected);
    }
    // Two levels of Parquet, written by the shell itself.
    let parquet_dir = dir.join("parquet");
    for (breed, year) in [("beagle", 2024), ("boxer", 2024), ("poodle", 2025)] {
        let part = parquet_dir.join(format!("year={year}/breed={breed}"));
        std::fs::create_dir_all(&part).unwrap();
        let o = run(&[
            "--table",
            &format!("s={}", data("small.csv")),
            "--csv-null",
            "NA",
            "-c",
            &format!(
                "COPY (SELECT no_show FROM s WHERE breed = '{breed}') TO '{}' STORED AS PARQUET",
                part.join("part-0.parquet").display()
            ),
        ]);
        assert!(o.status.success(), "{}", stderr(&o));
    }
    assert_eq!(stdout(&fit(&parquet_dir, false)), expected);
    let o = run(&[
        "--table",
        &format!("s={}", parquet_dir.display()),
        "--format",
        "csv",
        "-c",
        "SELECT year, arrow_typeof(year) AS t, COUNT(*) AS n FROM s GROUP BY year ORDER BY year",
    ]);
    assert_eq!(
        stdout(&o),
        "year,t,n\n2024,Int64,3\n2025,Int64,2\n",
        "{}",
        stderr(&o)
    );
    // Path values are typed as pyarrow and Spark type them (whole numbers, dates), a
    // code with a leading zero stays text, --csv-text keeps a column text, and the
    // directory Spark and pyarrow write for a missing value reads as NULL.
    for (dir_name, part) in [
        ("area=007/day=2024-03-01", "beagle"),
        ("area=12/day=2024-03-02", "boxer"),
        (
            "area=__HIVE_DEFAULT_PARTITION__/day=__HIVE_DEFAULT_PARTITION__",
            "poodle",
        ),
    ] {
        let to = dir.join("typed").join(dir_name);
        std::fs::create_dir_all(&to).unwrap();
        let from = parquet_dir.join(format!(
            "year={}/breed={part}/part-0.parquet",
            if part == "poodle" { 2025 } else { 2024 }
        ));
        std::fs::copy(from, to.join("part-0.parquet")).unwrap();
    }
    let typed = |extra: &[&str]| {
        let table = format!("s={}", dir.join("typed").display());
        let mut args = vec!["--table", &table, "--format", "csv"];
        args.extend_from_slice(extra);
        args.extend([
            "-c",
            "SELECT area, arrow_typeof(area) AS a, day, arrow_typeof(day) AS d, COUNT(*) AS n \
             FROM s GROUP BY area, day ORDER BY day NULLS FIRST",
        ]);
        stdout(&run(&args))
    };
    assert_eq!(
        typed(&[]),
        "area,a,day,d,n\n,Utf8,,Date32,2\n007,Utf8,2024-03-01,Date32,2\n12,Utf8,2024-03-02,Date32,1\n"
    );
    let o = run(&[
        "--table",
        &format!("s={}", parquet_dir.display()),
        "--csv-text",
        "year",
        "-c",
        "SELECT DISTINCT arrow_typeof(year) FROM s",
    ]);
    assert!(stdout(&o).contains("Utf8"), "{}", stderr(&o));
    // A file beside a deeper level's directories would be skipped by the listing.
    let stray = parquet_dir.join("year=2025/stray.parquet");
    std::fs::copy(
        parquet_dir.join("year=2025/breed=poodle/part-0.parquet"),
        &stray,
    )
    .unwrap();
    let o = fit(&parquet_dir, false);
    assert!(
        stderr(&o).contains(
            "holds 'stray.parquet' where the dataset's directories at that level are breed=..."
        ),
        "{}",
        stderr(&o)
    );
    std::fs::remove_file(stray).unwrap();

    // A level mixing partition directories with files would read part of the rows
    // without their column: refused.
    std::fs::write(csv_dir.join("stray.csv"), "no_show,amount\n1,2\n").unwrap();
    let o = fit(&csv_dir, true);
    assert!(
        stderr(&o).contains("mixes partition directories (breed=...)"),
        "{}",
        stderr(&o)
    );
    std::fs::remove_file(csv_dir.join("stray.csv")).unwrap();
    // The same tree with every part gzip-compressed, as Spark writes a compressed
    // CSV dataset: read from decompressed copies of the tree, with its path columns.
    let gz_dir = dir.join("gz");
    for entry in std::fs::read_dir(&csv_dir).unwrap() {
        let part = entry.unwrap().path();
        if !part.is_dir() {
            continue;
        }
        let to = gz_dir.join(part.file_name().unwrap());
        std::fs::create_dir_all(&to).unwrap();
        let mut encoder = flate2::write::GzEncoder::new(
            std::fs::File::create(to.join("part-0.csv.gz")).unwrap(),
            Default::default(),
        );
        use std::io::Write as _;
        encoder
            .write_all(&std::fs::read(part.join("part-0.csv")).unwrap())
            .unwrap();
        encoder.finish().unwrap();
    }
    std::fs::write(gz_dir.join("_SUCCESS"), "").unwrap();
    let (o, copies) = run_and_temporaries(&[
        "--table",
        &format!("s={}", gz_dir.display()),
        "--format",
        "csv",
        "-c",
        FIT,
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(stdout(&o), expected);
    assert!(!copies.exists(), "{} left behind", copies.display());
    // A plain part beside the gzip parts would be left out of the copies: refused.
    let beside = gz_dir.join("breed=beagle/part-1.csv");
    std::fs::write(&beside, "no_show,amount\n1,2\n").unwrap();
    let o = fit(&gz_dir, false);
    assert!(
        stderr(&o).contains("holds both gzip and uncompressed data files"),
        "{}",
        stderr(&o)
    );
}

#[test]
fn a_late_value_of_another_type_names_the_inference() {
    // Types are inferred from a file's first rows: a fraction at row 3001 of a column
    // of whole numbers fails the read. The error says why and what reads it.
    let dir = scratch!("late-value");
    let mut csv = String::from("k,amount\n");
    for i in 0..3000 {
        csv.push_str(&format!("k{},{i}\n", i % 10));
    }
    csv.push_str("k1,80.5\n");
    let file = dir.join("late.csv");
    std::fs::write(&file, csv).unwrap();
    let table = format!("a={}", file.display());
    let sum = "SELECT SUM(amount) AS s FROM a";
    let o = run(&["-t", &table, "-c", sum]);
    assert_eq!(o.status.code(), Some(1));
    for fragment in [
        "'80.5' as type 'Int64'",
        "first 1000 rows",
        "--csv-infer-rows all",
    ] {
        assert!(stderr(&o).contains(fragment), "{}", stderr(&o));
    }
    let o = run(&[
        "-t",
        &table,
        "--csv-infer-rows",
        "all",
        "--format",
        "csv",
        "-c",
        sum,
    ]);
    assert_eq!(stdout(&o), "s\n4498580.5\n", "{}", stderr(&o));
    let o = run(&["--csv-infer-rows", "0", "-c", "SELECT 1"]);
    assert!(
        stderr(&o).contains("not a number of rows from 1, or all"),
        "{}",
        stderr(&o)
    );
}

#[test]
fn text_that_is_not_utf8_is_named_with_the_way_out() {
    // A spreadsheet's CSV export in Windows-1252 ('caf\xe9'): refused where the type
    // inference reads it (the first rows) and where a query does (a later row), with
    // the conversion to run, in the shell and in encode.
    let dir = scratch!("not-utf8");
    let early = dir.join("early.csv");
    std::fs::write(&early, b"k,y\ncaf\xe9,1\nb,0\n").unwrap();
    let mut later = b"k,y\n".to_vec();
    for _ in 0..2000 {
        later.extend_from_slice(b"b,0\n");
    }
    later.extend_from_slice(b"caf\xe9,1\n");
    let late = dir.join("late.csv");
    std::fs::write(&late, later).unwrap();
    for file in [&early, &late] {
        let table = format!("a={}", file.display());
        let shell = run(&["-t", &table, "-c", "SELECT COUNT(*) FROM a"]);
        let train = file.to_str().unwrap();
        let out = dir.join("out");
        let encode = run(&[
            "encode",
            "--train",
            train,
            "--target",
            "y",
            "--columns",
            "k",
            "--out",
            out.to_str().unwrap(),
        ]);
        for o in [shell, encode] {
            assert_eq!(o.status.code(), Some(1), "{}", stderr(&o));
            for fragment in ["invalid UTF-8", "not UTF-8 text", "iconv -f windows-1252"] {
                assert!(stderr(&o).contains(fragment), "{}", stderr(&o));
            }
            assert_eq!(stderr(&o).lines().count(), 1, "{}", stderr(&o));
        }
    }
}

#[test]
fn json_arrays_with_one_file_name_stay_apart() {
    // Each JSON array is read through its own NDJSON copy: two files named alike in
    // different directories once shared one copy, and both tables read the last one.
    let dir = scratch!("json-names");
    for (sub, rows) in [
        ("x", r#"[{"a":1},{"a":2}]"#),
        ("y", r#"[{"a":10},{"a":20},{"a":30}]"#),
    ] {
        std::fs::create_dir_all(dir.join(sub)).unwrap();
        std::fs::write(dir.join(sub).join("data.json"), rows).unwrap();
    }
    let (o, copies) = run_and_temporaries(&[
        "--format",
        "csv",
        "-t",
        &format!("p={}", dir.join("x/data.json").display()),
        "-t",
        &format!("q={}", dir.join("y/data.json").display()),
        "-c",
        "SELECT (SELECT SUM(a) FROM p) AS p, (SELECT SUM(a) FROM q) AS q",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(stdout(&o), "p,q\n3,60\n");
    assert!(!copies.exists(), "{} left behind", copies.display());
}

#[test]
fn copy_to_parquet_and_read_back() {
    let dir = scratch!("copy");
    let out = dir.join("enc.parquet");
    let o = run(&[
        "-t",
        &format!("s={}", data("small.csv")),
        "--csv-null",
        "NA",
        "-c",
        &format!("COPY (SELECT breed, beta_posterior(no_show) AS p, nig_posterior(amount) AS a FROM s GROUP BY breed) TO '{}' STORED AS PARQUET", out.display()),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let o = run(&[
        "--format",
        "csv",
        "-t",
        &format!("e={}", out.display()),
        "-c",
        "SELECT breed, posterior_data_weight(p) AS n, posterior_data_weight(a) AS k FROM e ORDER BY breed",
    ]);
    assert_eq!(
        stdout(&o),
        "breed,n,k\nbeagle,2.0,2.0\nboxer,1.0,1.0\npoodle,2.0,1.0\n"
    );
}

#[test]
fn output_is_atomic() {
    let dir = scratch!("atomic");
    let out = dir.join("result.csv");
    let o = run(&[
        "--format",
        "csv",
        "-o",
        out.to_str().unwrap(),
        "-c",
        "SELECT 1 AS one",
    ]);
    assert!(o.status.success());
    assert_eq!(std::fs::read_to_string(&out).unwrap(), "one\n1\n");
    // A failing query leaves the old file intact and no temporary file behind.
    let o = run(&[
        "--format",
        "csv",
        "-o",
        out.to_str().unwrap(),
        "-c",
        "SELECT beta_posterior(y) FROM (VALUES (3)) t(y)",
    ]);
    assert_eq!(o.status.code(), Some(1));
    assert_eq!(std::fs::read_to_string(&out).unwrap(), "one\n1\n");
    assert_eq!(std::fs::read_dir(&dir).unwrap().count(), 1);
    // An unwritable destination is a clear error.
    let o = run(&["-o", "/nonexistent-dir/x.csv", "-c", "SELECT 1"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(
        stderr(&o).contains("cannot write /nonexistent-dir/x.csv"),
        "{}",
        stderr(&o)
    );
}

#[test]
fn exit_codes_and_one_line_errors() {
    let o = run(&["-c", "SELEC 1"]);
    assert_eq!(o.status.code(), Some(1));
    assert_eq!(stderr(&o).trim().lines().count(), 1, "{}", stderr(&o));
    assert!(stderr(&o).starts_with("error: "));
    let o = run(&["--no-such-flag"]);
    assert_eq!(o.status.code(), Some(2));
    let o = run(&["-t", "x=/no/such/file.parquet", "-c", "SELECT 1"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("does not exist"), "{}", stderr(&o));
    let o = run(&["-t", "nonsense", "-c", "SELECT 1"]);
    assert_eq!(o.status.code(), Some(2));
    let o = run(&["functions", "no_such_function"]);
    assert_eq!(o.status.code(), Some(2));
    let o = run(&["--memory-limit", "lots", "-c", "SELECT 1"]);
    assert_eq!(o.status.code(), Some(2));
    // Too little memory: the allocation that failed and the way out, without the
    // engine's list of every memory consumer.
    let o = run(&[
        "--memory-limit",
        "1K",
        "-c",
        "SELECT v % 7 AS k, COUNT(*) FROM generate_series(1, 10000) g(v) GROUP BY v % 7",
    ]);
    assert_eq!(o.status.code(), Some(1));
    for said in [
        "error: -c: the work needs more memory than the memory limit allows (Failed to allocate",
        "pool_size: 1024.0 B",
        "Raise --memory-limit, or give fewer --threads",
    ] {
        assert!(stderr(&o).contains(said), "{said}: {}", stderr(&o));
    }
    assert!(!stderr(&o).contains("consumers"), "{}", stderr(&o));
    let o = run(&["-c", "SELECT posterior_quantile(beta_prior(1, 1), 2)"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(
        stderr(&o).contains("posterior_quantile") && stderr(&o).contains("q = 2"),
        "{}",
        stderr(&o)
    );
    assert!(!stderr(&o).contains("backtrace"));
    // A window written on a reader instead of on the fit: the engine would drop it and
    // print one row for the whole table; the shell refuses it by name.
    let o = run(&[
        "-c",
        "SELECT posterior_mean(beta_posterior(x, beta_prior(1, 1))) OVER (ORDER BY x) \
         FROM (VALUES (0), (1)) t(x)",
    ]);
    assert_eq!(o.status.code(), Some(1));
    assert!(
        stderr(&o).contains("posterior_mean: OVER would be ignored"),
        "{}",
        stderr(&o)
    );
}

#[test]
fn functions_reference_lists_everything() {
    let o = run(&["functions"]);
    assert!(o.status.success());
    for f in posterity::docs::FUNCTIONS {
        assert!(stdout(&o).contains(f.syntax), "{} missing", f.name);
    }
    let o = run(&["functions", "posterior_quantile"]);
    assert!(stdout(&o).contains("posterior_quantile(p [, class], q)"));
    assert!(stdout(&o).contains("example:"));
}

#[test]
fn demo_runs_end_to_end() {
    let dir = scratch!("demo");
    let o = run(&["demo", "--rows", "5000", "--dir", dir.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = stdout(&o);
    for heading in [
        "The leak",
        "unseen postcode areas",
        "Dirichlet",
        "Normal-Inverse-Gamma",
        "Gamma-Poisson",
        "Cautions",
    ] {
        assert!(text.contains(heading), "missing {heading}");
    }
    assert!(Path::new(&dir.join("appointments.parquet")).exists());
}
