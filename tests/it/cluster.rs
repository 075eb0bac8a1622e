//! posterity on a real Ballista cluster on this machine: one `posterity-scheduler`
//! and two `posterity-executor` processes on 127.0.0.1, started and stopped here.
//! The same SQL through `posterity --cluster` gives the single-process numbers
//! (integer evidence identical, everything else within 1e-12 relative), and
//! faults give clear errors. The cluster binaries are a workspace member
//! (`cluster/`), built here with cargo on first use, with the crate's own unit
//! tests (the codec and an in-process cluster).

use std::net::TcpListener;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Output, Stdio};
use std::sync::OnceLock;
use std::time::{Duration, Instant};

use serde_json::Value;

/// The directory holding this build's binaries (the cluster's are built there too).
fn bin_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_BIN_EXE_posterity"))
        .parent()
        .unwrap()
        .to_path_buf()
}

/// Build the cluster binaries once (same profile and target directory as this
/// test), after running the cluster crate's unit tests.
fn cluster_binaries() -> &'static Path {
    static BUILT: OnceLock<PathBuf> = OnceLock::new();
    BUILT.get_or_init(|| {
        let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
        let root = env!("CARGO_MANIFEST_DIR");
        let release = bin_dir().ends_with("release");
        let run = |args: &[&str]| {
            let mut c = Command::new(&cargo);
            c.current_dir(root).args(args);
            if release {
                c.arg("--release");
            }
            let o = c.output().expect("cargo");
            assert!(
                o.status.success(),
                "cargo {}: {}",
                args.join(" "),
                String::from_utf8_lossy(&o.stderr)
            );
        };
        run(&["test", "-p", "posterity-cluster", "--lib"]);
        run(&["build", "-p", "posterity-cluster"]);
        bin_dir()
    })
}

fn free_port() -> u16 {
    TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port()
}

/// Processes killed when the test ends, however it ends.
struct Cluster {
    url: String,
    scheduler: Child,
    executors: Vec<Child>,
    _dir: PathBuf,
}

impl Drop for Cluster {
    fn drop(&mut self) {
        for c in self.executors.iter_mut().chain([&mut self.scheduler]) {
            c.kill().ok();
            c.wait().ok();
        }
    }
}

fn wait_for_port(port: u16) {
    let start = Instant::now();
    while std::net::TcpStream::connect(("127.0.0.1", port)).is_err() {
        assert!(
            start.elapsed() < Duration::from_secs(30),
            "nothing listens on {port}"
        );
        std::thread::sleep(Duration::from_millis(100));
    }
}

impl Cluster {
    /// A scheduler and `executors` executors (`plain` ones lack posterity's functions)
    /// that the scheduler gives up on after `timeout` seconds without a heartbeat
    /// (short only where a test kills one: on a busy machine heartbeats run late).
    fn start(name: &str, executors: usize, plain: bool, timeout: u64) -> Cluster {
        let bins = cluster_binaries();
        let dir = scratch!(name);
        let port = free_port();
        let scheduler = Command::new(bins.join("posterity-scheduler"))
            .args(["--bind-host", "127.0.0.1", "--external-host", "127.0.0.1"])
            .args(["--port", &port.to_string()])
            .args(["--executor-timeout", &timeout.to_string()])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        let mut cluster = Cluster {
            url: format!("df://127.0.0.1:{port}"),
            scheduler,
            executors: Vec::new(),
            _dir: dir.clone(),
        };
        wait_for_port(port);
        for i in 0..executors {
            let work = dir.join(format!("executor-{i}"));
            std::fs::create_dir_all(&work).unwrap();
            let (data, grpc) = (free_port(), free_port());
            let mut c = Command::new(bins.join("posterity-executor"));
            c.args([
                "--scheduler-host",
                "127.0.0.1",
                "--scheduler-port",
                &port.to_string(),
            ])
            .args([
                "--port",
                &data.to_string(),
                "--grpc-port",
                &grpc.to_string(),
            ])
            .args(["--concurrent-tasks", "2"])
            .arg("--work-dir")
            .arg(&work)
            .stdout(Stdio::null())
            .stderr(Stdio::null());
            if plain {
                c.arg("--without-posterity");
            }
            cluster.executors.push(c.spawn().unwrap());
            wait_for_port(data);
        }
        // Executors register with their first heartbeat: wait until a job runs.
        let start = Instant::now();
        loop {
            let o = cluster.shell(&["-c", "SELECT count(*) FROM (VALUES (1), (2)) t(x)"]);
            if o.status.success() {
                break;
            }
            assert!(
                start.elapsed() < Duration::from_secs(60),
                "the cluster never ran a job: {}",
                String::from_utf8_lossy(&o.stderr)
            );
            std::thread::sleep(Duration::from_millis(300));
        }
        cluster
    }

    /// The plain shell with `--cluster` (it hands over to `posterity-cluster`).
    fn shell(&self, args: &[&str]) -> Output {
        Command::new(env!("CARGO_BIN_EXE_posterity"))
            .args(["-q", "--cluster", &self.url])
            .args(args)
            .output()
            .unwrap()
    }
}

fn local(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_posterity"))
        .arg("-q")
        .args(args)
        .output()
        .unwrap()
}

/// 20,000 rows in four CSV files (so plans read partitions in parallel and shuffle
/// them): a 300-level key, a day, a 0/1 outcome, counts with exposure, an amount
/// and a class.
fn data_dir() -> &'static Path {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let dir = scratch!("data");
        let mut state = 11u64;
        let mut next = || {
            state = posterity::family::rng::mix64(state);
            state
        };
        for file in 0..4 {
            let mut s = String::from("k,day,y,events,exposure,amount,class\n");
            for _ in 0..5000 {
                let k = next() % 300;
                let day = next() % 60;
                let y = u64::from(next() % 100 < 10 + k % 20);
                let events = next() % 4;
                let exposure = 1 + next() % 9;
                let amount = (next() % 100_000) as f64 / 100.0 + k as f64;
                let class = ["a", "b", "c"][(next() % 3) as usize];
                s.push_str(&format!(
                    "k{k:03},{day},{y},{events},{exposure},{amount},{class}\n"
                ));
            }
            std::fs::write(dir.join(format!("part-{file}.csv")), s).unwrap();
        }
        dir
    })
}

fn json(o: &Output, what: &str) -> Vec<Value> {
    assert!(
        o.status.success(),
        "{what}: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    serde_json::from_slice::<Value>(&o.stdout)
        .unwrap_or_else(|e| panic!("{what}: {e}"))
        .as_array()
        .unwrap()
        .clone()
}

/// Same rows; integers and text equal; floats within 1e-12 relative.
fn same(local: &[Value], cluster: &[Value], what: &str) {
    assert_eq!(local.len(), cluster.len(), "{what}: rows");
    assert!(!local.is_empty(), "{what}: no rows compared");
    for (a, b) in local.iter().zip(cluster) {
        for (key, x) in a.as_object().unwrap() {
            let y = &b[key];
            match (x.as_f64(), y.as_f64()) {
                (Some(p), Some(q)) if x.is_f64() => {
                    let tolerance = 1e-12 * p.abs().max(q.abs()).max(1e-300);
                    assert!((p - q).abs() <= tolerance, "{what}: {key} {p} vs {q}");
                }
                _ => assert_eq!(x, y, "{what}: {key}"),
            }
        }
    }
}

/// The four families, fit_prior, out-of-fold and as-of windows: cluster = one process.
#[test]
fn the_cluster_gives_the_single_process_numbers() {
    let cluster = Cluster::start("numbers", 2, false, 120);
    let table = format!("t={}", data_dir().display());
    let queries = [
        (
            "beta",
            "SELECT k, posterior_mean(p) AS m, posterior_quantile(p, 0.05) AS q05, \
             CAST(posterior_data_weight(p) AS BIGINT) AS n FROM (SELECT k, \
             beta_posterior(y, beta_prior(2, 8)) AS p FROM t GROUP BY k) ORDER BY k",
        ),
        (
            "gamma",
            "SELECT k, posterior_mean(p) AS m, posterior_sd(p) AS sd FROM (SELECT k, \
             gamma_posterior(events, exposure, gamma_prior(2, 1)) AS p FROM t GROUP BY k) ORDER BY k",
        ),
        (
            "nig",
            "SELECT k, posterior_mean(p) AS m, posterior_quantile(p, 0.9) AS q90 FROM (SELECT k, \
             nig_posterior(amount, nig_prior(500, 1, 2, 20000)) AS p FROM t GROUP BY k) ORDER BY k",
        ),
        (
            "dirichlet",
            "SELECT k, posterior_mean(p, 'a') AS a, posterior_mean(p, 'c') AS c FROM (SELECT k, \
             dirichlet_posterior(class, dirichlet_prior(['a', 'b', 'c'], 1)) AS p FROM t GROUP BY k) \
             ORDER BY k",
        ),
        (
            "fit_prior",
            "SELECT posterior_mean(q) AS m, posterior_data_weight(q) AS strength FROM (SELECT \
             fit_prior(p) AS q FROM (SELECT k, beta_posterior(y, beta_prior(1, 1)) AS p FROM t \
             GROUP BY k))",
        ),
        (
            "out-of-fold",
            "WITH f AS (SELECT k, fold_of(day, 5) AS fold, beta_posterior(y, beta_prior(2, 8)) AS p \
             FROM t GROUP BY k, fold_of(day, 5)), a AS (SELECT k, posterior_pool(p) AS p FROM f \
             GROUP BY k) SELECT f.k, f.fold, posterior_mean(posterior_subtract(a.p, f.p)) AS m \
             FROM f JOIN a ON a.k = f.k ORDER BY f.k, f.fold",
        ),
        (
            "as-of window (empty frames read the query's prior)",
            "SELECT k, day, posterior_mean(beta_posterior(y, beta_prior(3, 7)) OVER (PARTITION BY \
             k ORDER BY day RANGE BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)) AS m FROM t \
             WHERE k < 'k020' ORDER BY k, day, m",
        ),
    ];
    for (what, sql) in queries {
        let args = ["-t", &table, "--format", "json", "-c", sql];
        let want = json(&local(&args), what);
        let got = json(&cluster.shell(&args), what);
        same(&want, &got, what);
    }
    // A gzip file is read from a copy on the client's machine, which other machines'
    // executors cannot see: refused in words instead of failing on a missing path.
    let packed = scratch!("packed").join("g.csv.gz");
    std::fs::write(&packed, [0x1f, 0x8b]).unwrap();
    let o = cluster.shell(&["-t", &format!("g={}", packed.display()), "-c", "SELECT 1"]);
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        o.status.code() == Some(2) && err.contains("is a gzip file") && err.contains("executors"),
        "{err}"
    );
    std::fs::remove_file(&packed).ok();
}

#[test]
fn an_unreachable_scheduler_is_named_within_seconds() {
    cluster_binaries();
    let port = free_port();
    let started = Instant::now();
    let o = local(&[
        "--cluster",
        &format!("df://127.0.0.1:{port}"),
        "-c",
        "SELECT 1",
    ]);
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(!o.status.success());
    assert!(err.contains(&format!("127.0.0.1:{port}")), "{err}");
    assert!(
        started.elapsed() < Duration::from_secs(20),
        "took {:?}",
        started.elapsed()
    );
}

#[test]
fn an_executor_without_posterity_gives_a_clear_error() {
    let cluster = Cluster::start("plain", 1, true, 120);
    let table = format!("t={}", data_dir().display());
    let o = cluster.shell(&[
        "-t",
        &table,
        "-c",
        "SELECT k, beta_posterior(y, beta_prior(1, 1)) FROM t GROUP BY k",
    ]);
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(!o.status.success());
    assert!(
        err.contains("beta_posterior") && err.contains("posterity-executor"),
        "{err}"
    );
}

/// Killing one executor in the middle of a job: the job finishes on the other with
/// the single-process answer, or fails with an error; the output file is whole or
/// absent, never partial.
#[test]
fn a_killed_executor_leaves_no_partial_output() {
    let mut cluster = Cluster::start("kill", 2, false, 8);
    let table = format!("t={}", data_dir().display());
    let out = cluster._dir.join("out.csv");
    let sql =
        "SELECT a.k, b.day, posterior_mean(beta_posterior(a.y, beta_prior(1, 1))) AS m FROM t a \
               JOIN t b ON a.k = b.k GROUP BY a.k, b.day ORDER BY a.k, b.day";
    let mut job = Command::new(env!("CARGO_BIN_EXE_posterity"))
        .args(["-q", "--cluster", &cluster.url, "-t", &table, "-o"])
        .arg(&out)
        .args(["-c", sql])
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    std::thread::sleep(Duration::from_millis(1500));
    cluster.executors[0].kill().ok();
    let status = job.wait().unwrap();
    if status.success() {
        eprintln!("the job finished on the other executor");
        let want = local(&["-t", &table, "--format", "csv", "-c", sql]);
        assert_eq!(
            std::fs::read(&out).unwrap(),
            want.stdout,
            "the finished job's file"
        );
    } else {
        let mut err = String::new();
        std::io::Read::read_to_string(&mut job.stderr.take().unwrap(), &mut err).ok();
        eprintln!("the job failed: {err}");
        assert!(!err.trim().is_empty(), "a failed job says why");
        assert!(!out.exists(), "a failed job left {}", out.display());
    }
}

/// `encode` on the cluster with a work directory writes what one process writes:
/// the same bundle and the same training rows (in any order on a cluster), for
/// k-fold encodings, as-of encodings with a horizon (window frames) and k-fold
/// encodings under a parent (`--hierarchy`).
#[test]
fn encode_on_the_cluster_gives_the_single_process_outputs() {
    let cluster = Cluster::start("encode", 2, false, 120);
    let dir = scratch!("outputs");
    let data = data_dir().display().to_string();
    for (name, extra) in [
        ("kfold", &[][..]),
        ("as-of", &["--time-column", "day", "--horizon", "5"][..]),
        ("kfold, hierarchy", &["--hierarchy", "k>class"][..]),
        (
            "as-of, hierarchy",
            &["--time-column", "day", "--hierarchy", "k>class"][..],
        ),
    ] {
        let encode = |out: &str| -> Vec<String> {
            let mut words: Vec<String> = [
                "encode",
                "--train",
                &data,
                "--target",
                "y",
                "--columns",
                "k,class",
                "--readers",
                "mean,sd",
            ]
            .iter()
            .chain(extra)
            .map(|w| w.to_string())
            .collect();
            words.push("--out".into());
            words.push(dir.join(name).join(out).display().to_string());
            words
        };
        let o = local(&words(&encode("local")));
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let mut on_cluster = encode("cluster");
        on_cluster.push("--work-dir".into());
        on_cluster.push(dir.join(name).join("work").display().to_string());
        let o = cluster.shell(&words(&on_cluster));
        assert!(
            o.status.success(),
            "{name}: {}",
            String::from_utf8_lossy(&o.stderr)
        );
        let out = |side: &str| dir.join(name).join(side);
        let bundle = |side: &str| std::fs::read_to_string(out(side).join("bundle.json")).unwrap();
        assert!(
            bundle("local") == bundle("cluster"),
            "{name}: the bundles differ"
        );
        let rows = |side: &str| {
            let table = format!("e={}", out(side).join("train_encoded.parquet").display());
            json(
                &local(&[
                    "-t",
                    &table,
                    "--format",
                    "json",
                    "-c",
                    "SELECT * FROM e ORDER BY k, day, y, events, exposure, amount, class",
                ]),
                side,
            )
        };
        let (here, there) = (rows("local"), rows("cluster"));
        assert_eq!(here.len(), 20_000);
        same(&here, &there, name);
    }
    std::fs::remove_dir_all(&dir).ok();
}

fn words(v: &[String]) -> Vec<&str> {
    v.iter().map(String::as_str).collect()
}

#[test]
fn encode_on_a_cluster_needs_a_work_directory() {
    cluster_binaries();
    let o = local(&[
        "--cluster",
        "df://127.0.0.1:1",
        "encode",
        "--train",
        "x.csv",
        "--target",
        "y",
        "--columns",
        "k",
        "--out",
        "o",
    ]);
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        !o.status.success() && err.contains("--cluster") && err.contains("--work-dir"),
        "{err}"
    );
}
