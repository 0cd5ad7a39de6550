//! The module boundary, checked mechanically: the analysis kernels and the
//! matrix layer know nothing of SQLite, the command line, the terminal or files
//! (DEVELOPERS.md, "Rules"). Common practice, no source.
use std::path::Path;

fn rust_files(dir: &Path, out: &mut Vec<std::path::PathBuf>) {
    for entry in std::fs::read_dir(dir).expect("source directory") {
        let p = entry.expect("directory entry").path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|e| e == "rs") {
            out.push(p);
        }
    }
}

#[test]
fn analysis_and_matrix_are_pure() {
    let forbidden = [
        "rusqlite",
        "refinery",
        "clap",
        "comfy_table",
        "indicatif",
        "std::fs",
        "println!",
        "eprintln!",
        "crate::store",
        "crate::cli",
        "crate::report",
    ];
    let root = crate::util::root();
    let mut files = Vec::new();
    rust_files(&root.join("src/analysis"), &mut files);
    rust_files(&root.join("src/matrix"), &mut files);
    assert!(
        files.len() > 10,
        "expected the kernel sources, found {}",
        files.len()
    );
    let mut problems = Vec::new();
    for f in &files {
        let text = std::fs::read_to_string(f).expect("readable source");
        for (no, line) in text.lines().enumerate() {
            let code = line.split("//").next().unwrap_or("");
            for word in forbidden {
                if code.contains(word) {
                    problems.push(format!("{}:{}: uses {word}", f.display(), no + 1));
                }
            }
        }
    }
    assert!(
        problems.is_empty(),
        "boundary crossed:\n{}",
        problems.join("\n")
    );
}
