//! Test helpers: a temporary directory with a store path and a command builder.
#![allow(dead_code)]

use std::path::{Path, PathBuf};

use assert_cmd::Command;

/// A temporary working directory holding one store.
pub struct TestEnv {
    pub dir: tempfile::TempDir,
    pub db: PathBuf,
}

impl TestEnv {
    pub fn new() -> TestEnv {
        let dir = tempfile::tempdir().expect("temporary directory");
        let db = dir.path().join("t.db");
        TestEnv { dir, db }
    }

    /// `tally --db <store> args…`, run in the temporary directory.
    pub fn cmd<I, S>(&self, args: I) -> Command
    where
        I: IntoIterator<Item = S>,
        S: AsRef<std::ffi::OsStr>,
    {
        let mut c = Command::cargo_bin("tally").expect("tally binary");
        c.current_dir(self.dir.path())
            .env_remove("TALLY_DB")
            .arg("--db")
            .arg(&self.db)
            .args(args);
        c
    }

    /// Run and return stdout, panicking with status, stdout and stderr on failure.
    pub fn stdout<I, S>(&self, args: I) -> String
    where
        I: IntoIterator<Item = S>,
        S: AsRef<std::ffi::OsStr>,
    {
        let o = self.cmd(args).output().expect("run tally");
        if !o.status.success() {
            panic!(
                "tally failed ({})\nstdout:\n{}\nstderr:\n{}",
                o.status,
                String::from_utf8_lossy(&o.stdout),
                String::from_utf8_lossy(&o.stderr)
            );
        }
        String::from_utf8(o.stdout).expect("utf-8 stdout")
    }

    /// Write a file in the temporary directory and return its path.
    pub fn write(&self, name: &str, content: &str) -> PathBuf {
        let p = self.dir.path().join(name);
        std::fs::write(&p, content).expect("write fixture");
        p
    }

    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }
}

/// The repository root.
pub fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}
