//! The shell as people use it: pipes that close early, output that reads back,
//! files that are not regular files, feedback, and the interactive prompt driven
//! through tmux (Ctrl-C cancels a query and the session keeps its tables).

use std::io::Read;
use std::process::{Command, Stdio};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_posterity"))
}

fn sample() -> String {
    format!(
        "a={}/demo/sample/appointments.csv",
        env!("CARGO_MANIFEST_DIR")
    )
}

// `posterity ... | head -3`: the reader goes away; the shell stops quietly with 0.
#[test]
fn a_closed_pipe_ends_quietly() {
    for format in ["table", "csv", "tsv", "json", "ndjson"] {
        let mut child = bin()
            .args(["--format", format, "-t", &sample(), "-c"])
            .arg("SELECT * FROM a CROSS JOIN (VALUES (1), (2), (3), (4), (5), (6), (7), (8)) v")
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap();
        let mut first = [0u8; 64];
        child
            .stdout
            .as_mut()
            .unwrap()
            .read_exact(&mut first)
            .unwrap();
        drop(child.stdout.take());
        let out = child.wait_with_output().unwrap();
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(0), "{format}: {stderr}");
        assert!(stderr.is_empty(), "{format}: {stderr}");
    }
}

// JSON keeps the column order, writes one row per line and `[]` for no rows, and
// reads back with -t; CSV writes posteriors as JSON objects (the bundle's form).
#[test]
fn output_reads_back() {
    let dir = scratch!("readback");
    let json = dir.join("enc.json");
    let o = bin()
        .args(["-t", &sample(), "-o", json.to_str().unwrap(), "-c"])
        .arg("SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) AS p, COUNT(*) AS n FROM a GROUP BY breed ORDER BY breed LIMIT 3")
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = std::fs::read_to_string(&json).unwrap();
    assert!(
        text.starts_with("[\n{\"breed\":\"breed_000\",\"p\":{\"a0\":2.0,"),
        "{text}"
    );
    assert_eq!(text.lines().count(), 5, "{text}");
    let back = bin()
        .args([
            "--format",
            "csv",
            "-t",
            &format!("j={}", json.display()),
            "-c",
        ])
        .arg("SELECT breed, posterior_mean(p) AS m, n FROM j ORDER BY breed")
        .output()
        .unwrap();
    let csv = String::from_utf8_lossy(&back.stdout);
    assert!(csv.starts_with("breed,m,n\nbreed_000,"), "{csv}");
    let empty = bin()
        .args(["--format", "json", "-c", "SELECT 1 AS a WHERE false"])
        .output()
        .unwrap();
    assert_eq!(String::from_utf8_lossy(&empty.stdout), "[]\n");
    let csv = bin()
        .args(["--format", "csv", "-c", "SELECT beta_prior(1, 3) AS p"])
        .output()
        .unwrap();
    assert_eq!(
        String::from_utf8_lossy(&csv.stdout),
        "p\n\"{\"\"a0\"\":1.0,\"\"b0\"\":3.0,\"\"successes\"\":0.0,\"\"trials\"\":0.0}\"\n"
    );
    // The format follows the extension when --format is not given.
    let tsv = dir.join("x.tsv");
    bin()
        .args(["-o", tsv.to_str().unwrap(), "-c", "SELECT 1 AS a, 2 AS b"])
        .output()
        .unwrap();
    assert_eq!(std::fs::read_to_string(&tsv).unwrap(), "a\tb\n1\t2\n");
    // Several results into one file are refused before anything runs.
    let o = bin()
        .args([
            "-o",
            tsv.to_str().unwrap(),
            "-c",
            "CREATE TABLE t AS VALUES (1); SELECT 1; SELECT 2",
        ])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr)
        .contains("takes the result of one statement, but 2 statements return rows"));
}

// --output writes into devices, FIFOs and through symbolic links instead of
// replacing them with a regular file.
#[test]
fn output_onto_special_files() {
    let dir = scratch!("special");
    // A symbolic link: the file it names gets the result; the link stays a link.
    let target = dir.join("real.csv");
    std::fs::write(&target, "old").unwrap();
    let link = dir.join("link.csv");
    std::os::unix::fs::symlink(&target, &link).unwrap();
    let o = bin()
        .args(["-o", link.to_str().unwrap(), "-c", "SELECT 7 AS x"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(std::fs::symlink_metadata(&link)
        .unwrap()
        .file_type()
        .is_symlink());
    assert_eq!(std::fs::read_to_string(&target).unwrap(), "x\n7\n");
    // A FIFO: written into, still a FIFO.
    let fifo = dir.join("pipe");
    assert!(Command::new("mkfifo")
        .arg(&fifo)
        .status()
        .unwrap()
        .success());
    let reader = {
        let fifo = fifo.clone();
        std::thread::spawn(move || std::fs::read_to_string(fifo).unwrap())
    };
    let o = bin()
        .args([
            "--format",
            "csv",
            "-o",
            fifo.to_str().unwrap(),
            "-c",
            "SELECT 8 AS y",
        ])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(reader.join().unwrap(), "y\n8\n");
    use std::os::unix::fs::FileTypeExt;
    assert!(std::fs::metadata(&fifo).unwrap().file_type().is_fifo());
    // A character device (a private copy of /dev/null, made when running as root).
    let null = dir.join("null");
    let made = Command::new("mknod")
        .arg(&null)
        .args(["c", "1", "3"])
        .status();
    if made.is_ok_and(|s| s.success()) {
        let o = bin()
            .args([
                "--format",
                "csv",
                "-o",
                null.to_str().unwrap(),
                "-c",
                "SELECT 9 AS z",
            ])
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        assert!(std::fs::metadata(&null)
            .unwrap()
            .file_type()
            .is_char_device());
    }
}

// Messages in the user's words, never an engine accumulator or an internal name.
#[test]
fn usage_errors_speak_the_users_words() {
    let dir = scratch!("words");
    let o = bin()
        .args(["demo", "--rows", "0", "--dir", dir.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(
        String::from_utf8_lossy(&o.stderr),
        "error: demo --rows 0 is too few: the story needs at least 1000 appointments (a year of bookings across the clinics)\n"
    );
    // Global options after the command are accepted.
    let o = bin()
        .args([
            "encode",
            "--train",
            "nosuch.csv",
            "--target",
            "y",
            "--columns",
            "k",
            "--out",
        ])
        .arg(dir.join("out"))
        .args(["--threads", "1"])
        .output()
        .unwrap();
    assert_eq!(
        String::from_utf8_lossy(&o.stderr),
        "error: --train: 'nosuch.csv' does not exist\n"
    );
}

// COPY and CREATE TABLE say what they did, also under -c.
#[test]
fn statements_report_what_they_did() {
    let dir = scratch!("feedback");
    let out = dir.join("t.csv");
    let o = bin()
        .args(["-c"])
        .arg(format!(
            "CREATE TABLE t AS VALUES (1), (2), (3); COPY t TO '{}'",
            out.display()
        ))
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(stderr.contains("= stored 3 rows in table t ("), "{stderr}");
    assert!(
        stderr.contains(&format!("= wrote 3 rows to {} (", out.display())),
        "{stderr}"
    );
    let quiet = bin()
        .args(["-q", "-c", "CREATE TABLE t AS VALUES (1)"])
        .output()
        .unwrap();
    assert!(quiet.stderr.is_empty());
}

/// A tmux session running the shell at a real terminal.
struct Tmux(String);

impl Tmux {
    fn start(name: &str) -> Option<Tmux> {
        let session = format!("posterity-{name}-{}", std::process::id());
        let ok = Command::new("tmux")
            .args(["new-session", "-d", "-x", "160", "-y", "50", "-s", &session])
            .arg(env!("CARGO_BIN_EXE_posterity"))
            .status()
            .ok()?
            .success();
        if !ok {
            return None;
        }
        // Keep the pane after the shell exits, to read its last words.
        Command::new("tmux")
            .args(["set-option", "-t", &session, "remain-on-exit", "on"])
            .status()
            .ok()?;
        Some(Tmux(session))
    }

    /// Send text literally (tmux would read a trailing `;` as its own separator)
    /// and named keys (Enter, C-c, C-d) as keys.
    fn keys(&self, keys: &[&str]) {
        for key in keys {
            let mut c = Command::new("tmux");
            c.args(["send-keys", "-t", &self.0]);
            if !matches!(*key, "Enter" | "C-c" | "C-d" | "Tab") {
                c.arg("-l");
            }
            // A `;` ending an argument separates tmux commands unless escaped.
            match key.strip_suffix(';') {
                Some(text) => c.arg(format!("{text}\\;")),
                None => c.arg(key),
            };
            assert!(c.status().unwrap().success(), "tmux send-keys {key}");
        }
    }

    /// Type `lines` faster than the shell reads them, as a paste does: one tmux
    /// command sends every line and its Enter, so later lines arrive while the
    /// shell is still busy with the first.
    fn paste(&self, lines: &[&str]) {
        let mut c = Command::new("tmux");
        for (i, line) in lines.iter().enumerate() {
            if i > 0 {
                c.arg(";");
            }
            let line = match line.strip_suffix(';') {
                Some(text) => format!("{text}\\;"),
                None => line.to_string(),
            };
            c.args(["send-keys", "-t", &self.0, "-l", &line, ";"]);
            c.args(["send-keys", "-t", &self.0, "Enter"]);
        }
        assert!(c.status().unwrap().success(), "tmux paste {lines:?}");
    }

    fn screen(&self) -> String {
        let o = Command::new("tmux")
            .args(["capture-pane", "-p", "-t", &self.0])
            .output()
            .unwrap();
        String::from_utf8_lossy(&o.stdout).to_string()
    }

    /// Wait until the screen contains `text` (up to 20 s).
    fn wait_for(&self, text: &str) -> String {
        for _ in 0..200 {
            let s = self.screen();
            if s.contains(text) {
                return s;
            }
            std::thread::sleep(std::time::Duration::from_millis(100));
        }
        panic!("'{text}' never appeared:\n{}", self.screen());
    }

    /// Wait until the last line on screen is an empty prompt `prompt` (up to 20 s).
    /// Keys typed after a Ctrl-C but before the next prompt may be dropped with the
    /// interrupted line (a loaded CI machine showed it), so a test waits for it.
    fn wait_for_prompt(&self, prompt: &str) {
        let last_line = |s: &str| {
            s.lines()
                .rev()
                .find(|l| !l.trim().is_empty())
                .map(|l| l.trim().to_string())
        };
        for _ in 0..200 {
            if last_line(&self.screen()).as_deref() == Some(prompt) {
                return;
            }
            std::thread::sleep(std::time::Duration::from_millis(100));
        }
        panic!("the prompt '{prompt}' never appeared:\n{}", self.screen());
    }

    fn alive(&self) -> bool {
        let o = Command::new("tmux")
            .args(["display-message", "-p", "-t", &self.0, "#{pane_dead}"])
            .output()
            .unwrap();
        String::from_utf8_lossy(&o.stdout).trim() == "0"
    }
}

impl Drop for Tmux {
    fn drop(&mut self) {
        Command::new("tmux")
            .args(["kill-session", "-t", &self.0])
            .status()
            .ok();
    }
}

// At the prompt, Ctrl-C cancels the running query and the session keeps its
// tables; exit leaves; Ctrl-D runs a part-typed statement instead of dropping it.
#[test]
fn the_prompt_cancels_queries_and_keeps_tables() {
    let tmux = Tmux::start("prompt").expect("tmux (Debian package tmux) is needed for this test");
    tmux.wait_for("1 ▸");
    tmux.keys(&["CREATE TABLE kept AS VALUES (1), (2), (3);", "Enter"]);
    tmux.wait_for("stored 3 rows in table kept");
    tmux.keys(&[
        "SELECT COUNT(*) FROM generate_series(1, 100000000000);",
        "Enter",
    ]);
    // Ctrl-C once the query runs (its progress line shows), not while the line is read.
    tmux.wait_for("rows read");
    tmux.keys(&["C-c"]);
    tmux.wait_for("cancelled (Ctrl-C)");
    tmux.wait_for_prompt("3 ▸");
    // Tab completes the table's name.
    tmux.keys(&["SELECT SUM(column1) AS total", "Enter", "FROM kep", "Tab"]);
    tmux.wait_for("FROM kept");
    // Ctrl-C drops the part-typed statement: the next line starts a new one.
    tmux.keys(&["C-c"]);
    tmux.wait_for_prompt("3 ▸");
    tmux.keys(&["SELECT SUM(column1) AS total", "Enter"]);
    tmux.wait_for_prompt("┆");
    tmux.keys(&["FROM kept;", "Enter"]);
    tmux.wait_for("| 6     |");
    // Ctrl-D with a statement typed but not ended: it runs, then the shell leaves.
    tmux.keys(&["SELECT 40 + 2 AS answer", "Enter"]);
    tmux.keys(&["C-d"]);
    tmux.wait_for("| 42     |");
    for _ in 0..50 {
        if !tmux.alive() {
            break;
        }
        std::thread::sleep(std::time::Duration::from_millis(100));
    }
    assert!(!tmux.alive(), "Ctrl-D leaves the shell");
    let again = Tmux::start("exit").unwrap();
    again.wait_for("1 ▸");
    // Lines typed ahead of the prompt (a pasted statement) are kept, not dropped
    // between one line and the next.
    again.paste(&[
        "CREATE TABLE pasted AS VALUES (1), (2), (3);",
        "SELECT SUM(column1)",
        "AS total FROM pasted;",
        "SELECT 40 + 2 AS answer;",
    ]);
    again.wait_for("| 42     |");
    assert!(again.screen().contains("| 6     |"), "{}", again.screen());
    again.keys(&["exit", "Enter"]);
    for _ in 0..50 {
        if !again.alive() {
            return;
        }
        std::thread::sleep(std::time::Duration::from_millis(100));
    }
    panic!("'exit' did not leave the shell");
}
