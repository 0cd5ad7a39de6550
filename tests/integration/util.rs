//! Test helpers: a temporary directory with a store path and a command builder.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::sync::OnceLock;

/// The demo data imported into a fresh store (see [`TestEnv::with_demo_data`]).
static DEMO_DATA: OnceLock<Template> = OnceLock::new();
/// The store, report and account of `tally demo` (see [`TestEnv::with_demo`]).
static DEMO: OnceLock<Template> = OnceLock::new();

/// The files of a store built once per test binary, held in memory so that no
/// temporary directory outlives the process; each test writes its own copy.
struct Template {
    /// (file name in the directory, content): the store `t.db` and any files
    /// the building commands wrote beside it.
    files: Vec<(String, Vec<u8>)>,
    /// What the building commands printed.
    stdout: String,
}

impl Template {
    /// Run `build` in a fresh [`TestEnv`], flush the store's write-ahead log
    /// into the main file, and keep every file of the directory.
    fn build(build: impl FnOnce(&TestEnv) -> String) -> Template {
        let env = TestEnv::new();
        let stdout = build(&env);
        // Every command checkpoints before it exits; do it once more so the
        // main file is complete, then close the last connection.
        tally::store::Store::open(&env.db)
            .expect("open template store")
            .checkpoint()
            .expect("checkpoint template store");
        let mut files = Vec::new();
        for entry in std::fs::read_dir(env.dir.path()).expect("template directory") {
            let p = entry.expect("directory entry").path();
            let name = p.file_name().unwrap().to_string_lossy().into_owned();
            let bytes = std::fs::read(&p).expect("template file");
            if name.ends_with("-wal") || name.ends_with("-shm") {
                assert!(
                    !name.ends_with("-wal") || bytes.is_empty(),
                    "the template store's write-ahead log was not checkpointed"
                );
                continue;
            }
            files.push((name, bytes));
        }
        assert!(files.iter().any(|(n, _)| n == "t.db"), "no template store");
        Template { files, stdout }
    }
}

fn demo_template() -> &'static Template {
    DEMO.get_or_init(|| Template::build(|env| env.stdout(["demo"])))
}

/// What `tally demo` printed when the template of [`TestEnv::with_demo`] was
/// built (its paths name the template's directory, not the test's).
pub fn demo_account() -> &'static str {
    &demo_template().stdout
}

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
    /// stores the runs of its analyses), built through `tally import`: a copy of
    /// one store built once per test binary.
    pub fn with_demo_data() -> TestEnv {
        TestEnv::from_template(DEMO_DATA.get_or_init(|| {
            Template::build(|env| {
                env.stdout(["init"]);
                for (kind, file) in [
                    ("sites", "sites.csv"),
                    ("protocols", "protocols.csv"),
                    ("taxa", "taxa.csv"),
                    ("records", "records.csv"),
                    ("attributes", "attributes.csv"),
                ] {
                    let path = root().join("demo-data").join(file);
                    env.stdout(["import", kind, path.to_str().expect("UTF-8 path")]);
                }
                String::new()
            })
        }))
    }

    /// The store and report written by `tally demo` (its runs included): a copy
    /// of one demo run once per test binary. Its printed account is
    /// [`demo_account`].
    pub fn with_demo() -> TestEnv {
        TestEnv::from_template(demo_template())
    }

    /// A new temporary directory holding a copy of the template's files.
    fn from_template(t: &Template) -> TestEnv {
        let env = TestEnv::new();
        for (name, bytes) in &t.files {
            std::fs::write(env.path(name), bytes).expect("copy of the template store");
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

    /// Write each `(kind, text)` as `KIND.csv` and import it with
    /// `tally import KIND`, in order (sites, protocols, taxa, records…).
    pub fn import_all(&self, files: &[(&str, &str)]) {
        for (kind, text) in files {
            let p = self.write(&format!("{kind}.csv"), text);
            self.stdout(["import", kind, p.to_str().unwrap()]);
        }
    }
}

/// The repository root.
pub fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}
