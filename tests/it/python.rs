//! posterity from Python: the package under `python/` installed the way users
//! install it (`pip install ./python`) into a virtual environment under `target/`,
//! then its tests (`python/tests`, pytest) against this build's shell, which is the
//! reference for every number.
//!
//! The extension is built with the dev profile into its own target directory
//! (`target/python-build`): a second cargo inside `cargo test` must not wait on the
//! outer one's build lock, and tests need no optimised build (benchmarks do:
//! BENCHMARKS.md).

use std::path::PathBuf;
use std::process::Command;

fn run(what: &str, command: &mut Command) {
    let o = command.output().unwrap_or_else(|e| panic!("{what}: {e}"));
    assert!(
        o.status.success(),
        "{what} failed:\n{}\n{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    );
}

/// PATH with `dir` first.
fn path_with(dir: &std::path::Path) -> std::ffi::OsString {
    let mut paths = vec![dir.to_path_buf()];
    paths.extend(std::env::split_paths(
        &std::env::var_os("PATH").unwrap_or_default(),
    ));
    std::env::join_paths(paths).unwrap_or_default()
}

#[test]
fn python_package() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let venv = root.join("target/python-venv");
    let python = venv.join("bin/python");
    if !python.exists() {
        run(
            "python3 -m venv",
            Command::new("python3").args(["-m", "venv"]).arg(&venv),
        );
    }
    // The dependencies once (a no-op when present), then the package itself, rebuilt
    // from this tree every time.
    run(
        "pip install the dependencies",
        Command::new(&python).args([
            "-m",
            "pip",
            "install",
            "-q",
            "datafusion>=55,<56",
            "pyarrow>=14",
            "pandas",
            "polars",
            "pytest",
            "maturin>=1.5,<2",
        ]),
    );
    run(
        "pip install ./python",
        Command::new(&python)
            .args([
                "-m",
                "pip",
                "install",
                "-q",
                "--no-deps",
                "--force-reinstall",
                "--no-build-isolation",
            ])
            .arg(root.join("python"))
            // The build backend (maturin) lives in the environment, not on PATH.
            .env("PATH", path_with(&venv.join("bin")))
            .env("MATURIN_PEP517_ARGS", "--profile dev")
            .env("CARGO_TARGET_DIR", root.join("target/python-build")),
    );
    run(
        "pytest python/tests",
        Command::new(&python)
            .args(["-m", "pytest", "-q", "-p", "no:cacheprovider"])
            .arg(root.join("python/tests"))
            .env("POSTERITY_BIN", env!("CARGO_BIN_EXE_posterity")),
    );
}
