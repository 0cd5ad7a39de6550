//! Citations resolve inside the repository. Comments and documents cite primary
//! sources (author, year, journal) and headings of the repository's own
//! documents, in one form, for example `docs/methods.md, "Dispersion"`: any
//! markdown file by its path from the repository root, a comma, and the heading
//! in double quotes exactly as written (backticks optional), on one line. This test scans every `.rs`, `.py`, `.md` and `.sh`
//! file under src/, tests/, benches/, examples/ and docs/, plus README.md and
//! DEVELOPERS.md, and fails with file:line for
//! - a document that is not in the repository (the planning documents the code
//!   was first written against) or a path into the folder they lived in;
//! - a section sign: sections of the repository's documents are cited by
//!   heading, sections of books as "section 3.4.2";
//! - a citation in the form above whose file or heading does not exist, or whose
//!   heading is not closed on the same line.
//!
//! Common practice, no source.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

/// Folders scanned, from the repository root.
const ROOTS: [&str; 5] = ["src", "tests", "benches", "examples", "docs"];
/// Top-level files scanned.
const TOP: [&str; 2] = ["README.md", "DEVELOPERS.md"];
/// Extensions scanned.
const EXTENSIONS: [&str; 4] = ["rs", "py", "md", "sh"];

/// Strings that must not occur, with what is wrong. Built from pieces so that
/// this file does not match itself.
fn forbidden() -> Vec<(String, &'static str)> {
    let mut v: Vec<(String, &'static str)> = [
        "METHODS",
        "METHODS-2",
        "DESIGN",
        "TESTING",
        "STYLE",
        "ECOSYSTEM",
    ]
    .iter()
    .map(|name| ([name, ".md"].concat(), "not in the repository"))
    .collect();
    v.push((["shared", "/"].concat(), "a folder outside the repository"));
    v.push(('\u{a7}'.to_string(), "section sign"));
    v
}

/// Markdown headings of a document: ATX headings outside fenced code blocks,
/// without their `#` marks and backticks.
fn headings(markdown: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut fenced = false;
    for line in markdown.lines() {
        let t = line.trim_start();
        if t.starts_with("```") || t.starts_with("~~~") {
            fenced = !fenced;
            continue;
        }
        if fenced || !t.starts_with('#') {
            continue;
        }
        let level = t.chars().take_while(|c| *c == '#').count();
        let rest = &t[level..];
        if level > 6 || !(rest.is_empty() || rest.starts_with(' ')) {
            continue;
        }
        out.push(normalise(rest.trim().trim_end_matches('#')));
    }
    out
}

/// A heading as compared: backticks removed, surrounding space trimmed.
fn normalise(heading: &str) -> String {
    heading.replace('`', "").trim().to_string()
}

/// The scanner: the forbidden strings, and the headings of the repository's
/// markdown files, each file read once.
struct Scanner {
    root: PathBuf,
    forbidden: Vec<(String, &'static str)>,
    cache: HashMap<String, Option<Vec<String>>>,
}

impl Scanner {
    fn new(root: &Path) -> Self {
        Scanner {
            root: root.to_path_buf(),
            forbidden: forbidden(),
            cache: HashMap::new(),
        }
    }

    /// Headings of `path` (from the repository root), `None` when there is no such file.
    fn headings(&mut self, path: &str) -> Option<&Vec<String>> {
        let root = &self.root;
        self.cache
            .entry(path.to_string())
            .or_insert_with(|| {
                std::fs::read_to_string(root.join(path))
                    .ok()
                    .map(|t| headings(&t))
            })
            .as_ref()
    }
}

/// Problems on one line of a file.
fn check_line(line: &str, docs: &mut Scanner) -> Vec<String> {
    let mut problems = Vec::new();
    for (pattern, why) in &docs.forbidden {
        if line.contains(pattern.as_str()) {
            problems.push(format!("{pattern} ({why})"));
        }
    }
    if line.trim_end().ends_with(".md,") {
        problems.push("citation split across lines: keep path and heading on one line".into());
    }
    let marker = ".md, \"";
    let mut from = 0;
    while let Some(at) = line[from..].find(marker) {
        let end_of_path = from + at + 3;
        let start = line[..end_of_path]
            .char_indices()
            .rev()
            .take_while(|(_, c)| c.is_ascii_alphanumeric() || "_./-".contains(*c))
            .last()
            .map_or(end_of_path, |(i, _)| i);
        let path = &line[start..end_of_path];
        let open = from + at + marker.len();
        from = open;
        if path.len() <= 3 {
            continue;
        }
        let Some(close) = line[open..].find('"') else {
            problems.push(format!(
                "citation of {path}: heading not closed on this line"
            ));
            continue;
        };
        let heading = normalise(&line[open..open + close]);
        from = open + close + 1;
        match docs.headings(path) {
            None => problems.push(format!("citation of {path}: no such file")),
            Some(h) if !h.contains(&heading) => {
                problems.push(format!("citation of {path}: no heading \"{heading}\""));
            }
            Some(_) => {}
        }
    }
    problems
}

/// Problems in one file's text, one entry per line: `name:line: problems | text`.
fn check_text(name: &str, text: &str, docs: &mut Scanner) -> Vec<String> {
    let mut out = Vec::new();
    for (no, line) in text.lines().enumerate() {
        let problems = check_line(line, docs);
        if !problems.is_empty() {
            let shown: String = line.trim().chars().take(110).collect();
            out.push(format!(
                "{name}:{}: {} | {shown}",
                no + 1,
                problems.join("; ")
            ));
        }
    }
    out
}

fn collect(dir: &Path, out: &mut Vec<PathBuf>) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for entry in entries {
        let p = entry.expect("directory entry").path();
        let hidden = p
            .file_name()
            .and_then(|n| n.to_str())
            .is_some_and(|n| n.starts_with('.'));
        if hidden {
            continue;
        }
        if p.is_dir() {
            collect(&p, out);
        } else if p
            .extension()
            .and_then(|e| e.to_str())
            .is_some_and(|e| EXTENSIONS.contains(&e))
        {
            out.push(p);
        }
    }
}

#[test]
fn every_citation_resolves_in_the_repository() {
    let root = crate::util::root();
    let mut files = Vec::new();
    for dir in ROOTS {
        collect(&root.join(dir), &mut files);
    }
    files.extend(TOP.iter().map(|f| root.join(f)));
    files.sort();
    assert!(
        files.len() > 50,
        "expected the sources and documents, found {} files",
        files.len()
    );
    let mut docs = Scanner::new(root);
    let mut problems = Vec::new();
    for f in &files {
        let text = std::fs::read_to_string(f).unwrap_or_else(|e| panic!("{}: {e}", f.display()));
        let name = f.strip_prefix(root).unwrap_or(f).display().to_string();
        problems.extend(check_text(&name, &text, &mut docs));
    }
    assert!(
        problems.is_empty(),
        "{} line(s) cite what is not in the repository. Cite the primary source (author, \
         year, journal, pages) and/or a heading of a repository document in the form \
         `docs/methods.md, \"Heading\"` (the heading must exist; one line); cite a book \
         section as \"section 3.4.2\", never with a section sign:\n{}",
        problems.len(),
        problems.join("\n")
    );
}

#[test]
fn the_scanner_catches_planted_citations() {
    let mut docs = Scanner::new(crate::util::root());
    let planted = "# Planted\n\n## Size and `shape`\n\n```\n# not a heading\n```\n### Third #\n";
    docs.cache
        .insert("docs/planted.md".into(), Some(headings(planted)));
    assert_eq!(
        docs.headings("docs/planted.md").unwrap(),
        &vec![
            "Planted".to_string(),
            "Size and shape".into(),
            "Third".into()
        ]
    );
    let md = ".md";
    let good = [
        format!("/// Hotelling's region (docs/planted{md}, \"Size and shape\")."),
        format!("// see docs/planted{md}, \"Size and `shape`\" and docs/planted{md}, \"Third\""),
        format!("// the real page too: docs/methods{md}, \"Dispersion\""),
        format!("Read `docs/methods{md}` before touching the kernels."),
        "// Knuth, The Art of Computer Programming vol. 2, section 3.4.2".to_string(),
    ];
    for line in &good {
        assert_eq!(check_line(line, &mut docs), Vec::<String>::new(), "{line}");
    }
    let sign = '\u{a7}';
    let bad = [
        format!("// (METHODS{md} {sign}6.3)"),
        format!("// values of METHODS-2{md}"),
        format!("//! DESIGN{md} target"),
        format!("// see /work/{}notes.txt", ["shared", "/"].concat()),
        format!("// docs/methods{md} {sign}9.3"),
        format!("// docs/planted{md}, \"No such heading\""),
        format!("// docs/nowhere{md}, \"Size and shape\""),
        format!("// docs/planted{md}, \"Size and"),
        format!("// as derived in docs/planted{md},"),
    ];
    let expected = [
        "METHODS",
        "METHODS-2",
        "DESIGN",
        "folder",
        "section sign",
        "no heading",
        "no such file",
        "not closed",
        "split",
    ];
    for (line, what) in bad.iter().zip(expected) {
        let found = check_line(line, &mut docs);
        assert!(
            !found.is_empty() && found.iter().any(|p| p.contains(what)),
            "{line}: {found:?}"
        );
    }
    let report = check_text("a.rs", &format!("ok\n{}\n", bad[0]), &mut docs);
    assert_eq!(report.len(), 1);
    assert!(report[0].starts_with("a.rs:2: "), "{}", report[0]);
    assert!(report[0].contains("section sign"), "{}", report[0]);
}
