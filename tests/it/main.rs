//! The integration tests, in one binary (each test binary links the engine again).
//! Every check against the outside world names its source beside the test.

use std::path::{Path, PathBuf};
use std::sync::OnceLock;

/// `scratch!("name")`: a fresh, empty directory for one test's files, named after the
/// test's module and `name` (so two modules may use the same name).
macro_rules! scratch {
    ($name:expr) => {
        $crate::scratch_dir(module_path!(), $name)
    };
}

/// `<temp>/posterity-tests/<process id>/<module>-<name>`, emptied. A run's directories
/// stay until the next run starts (a failed test's files can be read) and that run
/// removes those of runs that have ended: repeated runs on a machine with little disk
/// would otherwise fill it, as they once did and failed CI.
pub fn scratch_dir(module: &str, name: &str) -> PathBuf {
    static ROOT: OnceLock<PathBuf> = OnceLock::new();
    let root = ROOT.get_or_init(|| {
        let base = std::env::temp_dir().join("posterity-tests");
        // Only where a process's liveness can be read (Linux's /proc).
        if Path::new("/proc/self").exists() {
            for entry in std::fs::read_dir(&base).into_iter().flatten().flatten() {
                let alive = entry
                    .file_name()
                    .to_str()
                    .and_then(|pid| pid.parse::<u32>().ok())
                    .is_some_and(|pid| Path::new(&format!("/proc/{pid}")).exists());
                if !alive {
                    std::fs::remove_dir_all(entry.path()).ok();
                }
            }
        }
        base.join(std::process::id().to_string())
    });
    let module = module.rsplit("::").next().unwrap_or(module);
    let dir = root.join(format!("{module}-{name}"));
    std::fs::remove_dir_all(&dir).ok();
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

mod bad_inputs;
mod calibration;
mod cli;
mod cluster;
mod empirical;
mod encode;
mod family_examples;
mod family_reference;
mod faults;
mod leakage;
mod python;
mod readme;
mod recipes;
mod report;
mod shell_manners;
mod sql;
