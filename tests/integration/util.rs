//! Test helpers: a temporary directory with a store path and a command builder.
#![allow(dead_code)]

use std::path::{Path, PathBuf};

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

    /// A store holding the demo data and no stored runs (`tally demo` itself
    /// stores the runs of its analyses), built through `tally import`.
    pub fn with_demo_data() -> TestEnv {
        let env = TestEnv::new();
        env.stdout(["init"]);
        for (kind, file) in [
            ("sites", "sites.csv"),
            ("protocols", "protocols.csv"),
            ("taxa", "taxa.csv"),
            ("records", "records.csv"),
        ] {
            let path = root().join("demo-data").join(file);
            env.stdout(["import", kind, path.to_str().expect("UTF-8 path")]);
        }
        env
    }

    /// `tally --db <store> args…`, run in the temporary directory.
    pub fn cmd<I, S>(&self, args: I) -> assert_cmd::Command
    where
        I: IntoIterator<Item = S>,
        S: AsRef<std::ffi::OsStr>,
    {
        let mut c = assert_cmd::cargo::cargo_bin_cmd!("tally");
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

    /// Run and return (exit code, stdout, stderr).
    pub fn run<I, S>(&self, args: I) -> (i32, String, String)
    where
        I: IntoIterator<Item = S>,
        S: AsRef<std::ffi::OsStr>,
    {
        let o = self.cmd(args).output().expect("run tally");
        (
            o.status.code().unwrap_or(-1),
            String::from_utf8_lossy(&o.stdout).into_owned(),
            String::from_utf8_lossy(&o.stderr).into_owned(),
        )
    }

    /// The store's content dump, read through the library.
    pub fn dump(&self) -> String {
        tally::store::Store::open(&self.db)
            .expect("open store")
            .content_dump()
            .expect("dump")
    }

    /// Write a file of bytes in the temporary directory and return its path.
    pub fn write_bytes(&self, name: &str, content: &[u8]) -> PathBuf {
        let p = self.dir.path().join(name);
        std::fs::write(&p, content).expect("write fixture");
        p
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
