//! Faults and limits at the shell: broken input files, writes killed midway,
//! a memory limit, and determinism across thread counts.

use std::process::{Command, Stdio};
use std::time::Duration;

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_posterity"))
}

#[test]
fn broken_files_fail_at_registration_naming_the_file() {
    let d = scratch!("files");
    let write = |name: &str, bytes: &[u8]| std::fs::write(d.join(name), bytes).unwrap();
    write("ragged.csv", b"a,b\n1,2\n3\n4,5,6\n");
    write("quote.csv", b"a,b\n1,\"x\n2,y\n");
    write("empty.csv", b"");
    write("twice.csv", b"breed,no_show,breed\nbeagle,1,pug\n");
    write("trailing.csv", b"breed,no_show,,\nbeagle,1,,\n");
    // A delimiter inside quotes is part of the name: these are three names.
    write(
        "quoted.csv",
        b"\"breed\",\"a,b\",\"breed,\"\nbeagle,1,pug\n",
    );
    write("empty.parquet", b"");
    write("fake.parquet", b"hello, not parquet at all");
    let good = std::fs::read(format!(
        "{}/tests/data/small.csv",
        env!("CARGO_MANIFEST_DIR")
    ))
    .unwrap();
    write("good.csv", &good);
    // A real Parquet file cut short.
    let o = bin()
        .current_dir(&d)
        .args([
            "-t",
            "g=good.csv",
            "-c",
            "COPY (SELECT * FROM g) TO 'whole.parquet' STORED AS PARQUET",
        ])
        .output()
        .unwrap();
    assert!(o.status.success());
    let whole = std::fs::read(d.join("whole.parquet")).unwrap();
    write("truncated.parquet", &whole[..whole.len() / 2]);
    std::fs::create_dir_all(d.join("mixed")).unwrap();
    write("mixed/a.csv", b"breed,no_show\nbeagle,1\n");
    write("mixed/b.csv", b"clinic\nclinic_01\n");
    let cases: &[(&str, &[&str])] = &[
        ("ragged.csv", &["ragged.csv", "unequal lengths"]),
        ("quote.csv", &["quote.csv", "unterminated quoted field"]),
        ("empty.csv", &["empty.csv", "empty", "no header row"]),
        (
            "twice.csv",
            &["twice.csv", "names the column 'breed' twice"],
        ),
        (
            "trailing.csv",
            &["trailing.csv", "more than one column without a name"],
        ),
        (
            "empty.parquet",
            &["empty.parquet", "not a complete Parquet file"],
        ),
        (
            "fake.parquet",
            &["fake.parquet", "not a complete Parquet file"],
        ),
        (
            "truncated.parquet",
            &["truncated.parquet", "not a complete Parquet file"],
        ),
        (
            "mixed",
            &["mixed", "disagree on their columns", "a.csv", "b.csv"],
        ),
        ("missing.parquet", &["missing.parquet", "does not exist"]),
        ("nothing*.csv", &["nothing*.csv", "No files found"]),
    ];
    for (path, fragments) in cases {
        let o = bin()
            .current_dir(&d)
            .args(["-t", &format!("x={path}"), "-c", "SELECT * FROM x"])
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(1), "{path}: {err}");
        assert_eq!(err.trim().lines().count(), 1, "{path}: one line: {err}");
        for f in *fragments {
            assert!(err.contains(f), "{path}: missing '{f}' in {err}");
        }
    }
    let o = bin()
        .current_dir(&d)
        .args(["-t", "x=quoted.csv", "-c", "SELECT * FROM x"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    // A column of the wrong type deep in a file is a query error naming the value.
    let mut typed = String::from("a,b\n");
    for i in 0..3000 {
        typed.push_str(&format!("{i},{i}\n"));
    }
    typed.push_str("oops,1\n");
    write("typed.csv", typed.as_bytes());
    let o = bin()
        .current_dir(&d)
        .args(["-t", "x=typed.csv", "-c", "SELECT SUM(a) FROM x"])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(err.contains("oops"), "{err}");
}

// Writes go to a temporary file and are renamed: a process killed at any moment
// leaves either the old file or the complete new one, never a partial file.
#[test]
fn killed_writes_never_leave_partial_output() {
    let d = scratch!("kill");
    let out = d.join("result.csv");
    std::fs::write(&out, "old\n").unwrap();
    let sql = "SELECT value, value * 3 AS triple FROM generate_series(1, 1500000)";
    let expected_lines = 1_500_001;
    for wait_ms in [30, 120, 400, 900, 1600, 2500] {
        let mut child = bin()
            .args(["--format", "csv", "-o", out.to_str().unwrap(), "-c", sql])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_millis(wait_ms));
        child.kill().ok();
        child.wait().unwrap();
        let text = std::fs::read_to_string(&out).unwrap();
        let lines = text.lines().count();
        assert!(
            text == "old\n" || lines == expected_lines,
            "after {wait_ms} ms: {lines} lines"
        );
        if lines == expected_lines {
            std::fs::write(&out, "old\n").unwrap();
        }
    }
    // The next successful write also clears leftovers of killed writers.
    let o = bin()
        .args([
            "--format",
            "csv",
            "-o",
            out.to_str().unwrap(),
            "-c",
            "SELECT 1 AS one",
        ])
        .output()
        .unwrap();
    assert!(o.status.success());
    let names: Vec<String> = std::fs::read_dir(&d)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
        .collect();
    assert_eq!(names, vec!["result.csv".to_string()]);
}

// A GROUP BY over 5 M distinct levels under a small memory limit ends cleanly:
// an out-of-memory error from the engine (exit 1) or a spill and success.
#[test]
fn memory_limit_is_respected() {
    let o = bin()
        .args(["--memory-limit", "16M", "--format", "csv", "-c",
            "SELECT COUNT(*) AS levels, SUM(posterior_mean(p)) AS s FROM (SELECT value AS k, beta_posterior(value % 2) AS p FROM generate_series(1, 5000000) GROUP BY value)"])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    match o.status.code() {
        Some(0) => assert!(String::from_utf8_lossy(&o.stdout).contains("5000000")),
        Some(1) => assert!(
            err.contains("Resources exhausted") || err.contains("memory"),
            "{err}"
        ),
        other => panic!("killed or crashed ({other:?}): {err}"),
    }
}

// Integer evidence (0/1 outcomes, counts) gives identical bytes whatever the
// thread count; see README "Determinism" for fractional statistics.
#[test]
fn identical_output_across_thread_counts() {
    let table = format!(
        "a={}/demo/sample/appointments.csv",
        env!("CARGO_MANIFEST_DIR")
    );
    let sql = "SELECT breed, posterior_mean(p) AS m, posterior_quantile(p, 0.05) AS q FROM (SELECT breed, beta_posterior(no_show) AS p FROM a GROUP BY breed) ORDER BY breed";
    let run = |threads: &str| {
        bin()
            .args([
                "--threads",
                threads,
                "--format",
                "csv",
                "-t",
                &table,
                "-c",
                sql,
            ])
            .output()
            .unwrap()
            .stdout
    };
    let one = run("1");
    assert!(one.len() > 1000);
    assert_eq!(one, run("3"));
    assert_eq!(one, run("8"));
}
