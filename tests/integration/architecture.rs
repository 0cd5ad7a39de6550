//! The module boundaries, checked mechanically (DEVELOPERS.md, "Rules"; the
//! layering of commands, workflow, report and kernels):
//! - the analysis kernels and the matrix layer know nothing of SQLite, the
//!   command line, the terminal, files or the layers above them;
//! - the workflow layer has no command line, no printing, no environment and no
//!   process control (those belong to `src/cli/`);
//! - the report layer renders outcomes and knows nothing of the store, the
//!   command line or SQLite.
//!
//! The sources are read as Rust tokens: comments, string and character
//! literals are skipped, and paths are resolved through `crate::`, `self::`,
//! `super::` and `{…}` groups, so that `use crate::{cli, store}` or
//! `use std::{env, fs}` are caught as well as `crate::store::Store`. Common
//! practice, no source.
use std::path::{Path, PathBuf};

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for entry in std::fs::read_dir(dir).expect("source directory") {
        let p = entry.expect("directory entry").path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|e| e == "rs") {
            out.push(p);
        }
    }
}

/// What a layer must not use.
enum Forbidden {
    /// An identifier anywhere in code: an external crate's name (`clap`,
    /// `rusqlite`, …), however it is reached.
    Crate(&'static str),
    /// A macro call, `name!`.
    Macro(&'static str),
    /// A path prefix, e.g. `std::env` or `crate::store`, after resolving
    /// `self`/`super` and `{…}` groups.
    Path(&'static str),
}

impl Forbidden {
    fn describe(&self) -> String {
        match self {
            Forbidden::Crate(c) => format!("the crate `{c}`"),
            Forbidden::Macro(m) => format!("the macro `{m}!`"),
            Forbidden::Path(p) => format!("`{p}`"),
        }
    }
}

#[derive(Debug, Clone, PartialEq)]
enum Tok {
    Ident(String),
    /// `::`
    PathSep,
    Punct(char),
}

#[derive(Debug, Clone)]
struct Token {
    tok: Tok,
    line: usize,
    col: usize,
}

fn is_ident_start(c: char) -> bool {
    c == '_' || c.is_alphabetic()
}

fn is_ident_char(c: char) -> bool {
    c == '_' || c.is_alphanumeric()
}

/// Rust source as identifiers, `::` and punctuation, with comments, strings,
/// characters, lifetimes and numbers left out.
fn lex(src: &str) -> Vec<Token> {
    let c: Vec<char> = src.chars().collect();
    let n = c.len();
    let mut out = Vec::new();
    let (mut i, mut line, mut col) = (0usize, 1usize, 1usize);
    // Advance one character, keeping line and column.
    let step = |i: &mut usize, line: &mut usize, col: &mut usize| {
        if c[*i] == '\n' {
            *line += 1;
            *col = 1;
        } else {
            *col += 1;
        }
        *i += 1;
    };
    let at = |k: usize| c.get(k).copied().unwrap_or('\0');
    while i < n {
        let ch = c[i];
        if ch.is_whitespace() {
            step(&mut i, &mut line, &mut col);
        } else if ch == '/' && at(i + 1) == '/' {
            while i < n && c[i] != '\n' {
                step(&mut i, &mut line, &mut col);
            }
        } else if ch == '/' && at(i + 1) == '*' {
            let mut depth = 0;
            while i < n {
                if c[i] == '/' && at(i + 1) == '*' {
                    depth += 1;
                    step(&mut i, &mut line, &mut col);
                } else if c[i] == '*' && at(i + 1) == '/' {
                    depth -= 1;
                    step(&mut i, &mut line, &mut col);
                    if depth == 0 {
                        step(&mut i, &mut line, &mut col);
                        break;
                    }
                }
                step(&mut i, &mut line, &mut col);
            }
        } else if ch == '"' {
            skip_string(&c, &mut i, &mut line, &mut col, &step);
        } else if ch == '\'' {
            if at(i + 1) == '\\' {
                // An escaped character literal: '\n', '\'', '\u{…}'.
                step(&mut i, &mut line, &mut col);
                step(&mut i, &mut line, &mut col);
                step(&mut i, &mut line, &mut col);
                while i < n && c[i] != '\'' {
                    step(&mut i, &mut line, &mut col);
                }
                if i < n {
                    step(&mut i, &mut line, &mut col);
                }
            } else if at(i + 2) == '\'' {
                // A character literal: 'x'.
                for _ in 0..3 {
                    step(&mut i, &mut line, &mut col);
                }
            } else {
                // A lifetime or label: 'a.
                step(&mut i, &mut line, &mut col);
                while i < n && is_ident_char(c[i]) {
                    step(&mut i, &mut line, &mut col);
                }
            }
        } else if ch.is_ascii_digit() {
            while i < n && (is_ident_char(c[i]) || (c[i] == '.' && at(i + 1).is_ascii_digit())) {
                step(&mut i, &mut line, &mut col);
            }
        } else if is_ident_start(ch) {
            let (l0, c0) = (line, col);
            let start = i;
            while i < n && is_ident_char(c[i]) {
                step(&mut i, &mut line, &mut col);
            }
            let word: String = c[start..i].iter().collect();
            let next = at(i);
            let raw_prefix = matches!(word.as_str(), "r" | "br" | "cr");
            if raw_prefix
                && (next == '"' || (next == '#' && (at(i + 1) == '"' || at(i + 1) == '#')))
            {
                // A raw string: r"…", r#"…"#, br##"…"##.
                let mut hashes = 0;
                while at(i) == '#' {
                    hashes += 1;
                    step(&mut i, &mut line, &mut col);
                }
                step(&mut i, &mut line, &mut col); // opening quote
                loop {
                    if i >= n {
                        break;
                    }
                    if c[i] == '"' && (1..=hashes).all(|k| at(i + k) == '#') {
                        for _ in 0..=hashes {
                            step(&mut i, &mut line, &mut col);
                        }
                        break;
                    }
                    step(&mut i, &mut line, &mut col);
                }
            } else if word == "r" && next == '#' && is_ident_start(at(i + 1)) {
                // A raw identifier: r#name.
                step(&mut i, &mut line, &mut col);
                let s = i;
                while i < n && is_ident_char(c[i]) {
                    step(&mut i, &mut line, &mut col);
                }
                out.push(Token {
                    tok: Tok::Ident(c[s..i].iter().collect()),
                    line: l0,
                    col: c0,
                });
            } else if matches!(word.as_str(), "b" | "c") && next == '"' {
                skip_string(&c, &mut i, &mut line, &mut col, &step);
            } else if word == "b" && next == '\'' {
                // A byte literal: b'x', b'\n'.
                step(&mut i, &mut line, &mut col);
                if at(i) == '\\' {
                    step(&mut i, &mut line, &mut col);
                }
                step(&mut i, &mut line, &mut col);
                while i < n && c[i] != '\'' {
                    step(&mut i, &mut line, &mut col);
                }
                if i < n {
                    step(&mut i, &mut line, &mut col);
                }
            } else {
                out.push(Token {
                    tok: Tok::Ident(word),
                    line: l0,
                    col: c0,
                });
            }
        } else if ch == ':' && at(i + 1) == ':' {
            out.push(Token {
                tok: Tok::PathSep,
                line,
                col,
            });
            step(&mut i, &mut line, &mut col);
            step(&mut i, &mut line, &mut col);
        } else {
            out.push(Token {
                tok: Tok::Punct(ch),
                line,
                col,
            });
            step(&mut i, &mut line, &mut col);
        }
    }
    out
}

/// Skip a "…" string with escapes, `i` at its opening quote.
fn skip_string(
    c: &[char],
    i: &mut usize,
    line: &mut usize,
    col: &mut usize,
    step: &dyn Fn(&mut usize, &mut usize, &mut usize),
) {
    step(i, line, col);
    while *i < c.len() && c[*i] != '"' {
        if c[*i] == '\\' {
            step(i, line, col);
        }
        if *i < c.len() {
            step(i, line, col);
        }
    }
    if *i < c.len() {
        step(i, line, col);
    }
}

/// The module path of a source file under `src/`: `src/report/text/mod.rs`
/// is `crate::report::text`, `src/workflow/runs.rs` is `crate::workflow::runs`.
fn module_path(src: &Path, file: &Path) -> Vec<String> {
    let rel = file.strip_prefix(src).expect("file under src/");
    let mut m = vec!["crate".to_string()];
    for part in rel.iter() {
        let s = part.to_string_lossy();
        let s = s.strip_suffix(".rs").unwrap_or(&s);
        if s != "mod" && s != "lib" {
            m.push(s.to_string());
        }
    }
    m
}

fn ident(tokens: &[Token], k: usize) -> Option<&str> {
    match tokens.get(k).map(|t| &t.tok) {
        Some(Tok::Ident(s)) => Some(s),
        _ => None,
    }
}

fn is(tokens: &[Token], k: usize, want: &Tok) -> bool {
    tokens.get(k).is_some_and(|t| &t.tok == want)
}

/// The paths named by the path that starts at token `k`, resolved to
/// absolute paths (`crate::…`, `std::…`), with a `{…}` group giving one path
/// per member (its first segment). Empty when no path starts at `k`.
/// `super` is resolved from the file's module (not from an inline `mod`).
fn paths_at(tokens: &[Token], k: usize, module: &[String]) -> Vec<Vec<String>> {
    if k > 0 && is(tokens, k - 1, &Tok::PathSep) {
        return Vec::new(); // inside a path, not its start
    }
    let keyword = matches!(ident(tokens, k), Some("crate" | "self" | "super"));
    if keyword && !is(tokens, k + 1, &Tok::PathSep) {
        return Vec::new(); // `self.x`, `crate` alone: not a path into a module
    }
    let mut k = k;
    let mut base: Vec<String> = match ident(tokens, k) {
        Some("crate") => vec!["crate".into()],
        Some("self") => module.to_vec(),
        Some("super") => {
            let mut m = module.to_vec();
            m.pop();
            while is(tokens, k + 1, &Tok::PathSep) && ident(tokens, k + 2) == Some("super") {
                m.pop();
                k += 2;
            }
            m
        }
        Some(s @ ("std" | "core" | "alloc")) => vec![s.to_string()],
        // A leading `::` (`::std::env`) starts a path after `use` or an opening
        // punctuation, not after a segment or `Vec::<T>`.
        None if is(tokens, k, &Tok::PathSep)
            && (k == 0
                || ident(tokens, k - 1) == Some("use")
                || matches!(&tokens[k - 1].tok, Tok::Punct(p) if !matches!(p, '>' | ')' | ']'))) =>
        {
            match ident(tokens, k + 1) {
                Some(s) => {
                    k += 1;
                    vec![s.to_string()]
                }
                None => return Vec::new(),
            }
        }
        _ => return Vec::new(),
    };
    loop {
        if !is(tokens, k + 1, &Tok::PathSep) {
            return vec![base];
        }
        if let Some(s) = ident(tokens, k + 2) {
            base.push(s.to_string());
            k += 2;
        } else if is(tokens, k + 2, &Tok::Punct('{')) {
            // A group: the first segment of each top-level member.
            let mut out = vec![base.clone()];
            let mut depth = 0;
            let mut member_start = true;
            for t in &tokens[k + 2..] {
                match &t.tok {
                    Tok::Punct('{') => {
                        depth += 1;
                        member_start = depth == 1;
                        continue;
                    }
                    Tok::Punct('}') => {
                        depth -= 1;
                        if depth == 0 {
                            break;
                        }
                    }
                    Tok::Punct(',') if depth == 1 => {
                        member_start = true;
                        continue;
                    }
                    Tok::Ident(s) if member_start && depth == 1 => {
                        let mut p = base.clone();
                        if s != "self" {
                            p.push(s.clone());
                        }
                        out.push(p);
                    }
                    _ => {}
                }
                member_start = false;
            }
            return out;
        } else {
            return vec![base];
        }
    }
}

/// Every use of a forbidden item in the files under `dirs` (relative to the
/// repository root), one entry each: `path:line:col: uses …` followed by the
/// source line.
fn crossings(dirs: &[&str], forbidden: &[Forbidden]) -> Vec<String> {
    let root = crate::util::root();
    let src = root.join("src");
    let mut files = Vec::new();
    for d in dirs {
        let dir = root.join(d);
        assert!(dir.is_dir(), "{d} is not a directory");
        let before = files.len();
        rust_files(&dir, &mut files);
        assert!(files.len() > before, "no Rust sources under {d}");
    }
    files.sort();
    let mut problems = Vec::new();
    for f in &files {
        let text = std::fs::read_to_string(f).expect("readable source");
        let lines: Vec<&str> = text.lines().collect();
        let tokens = lex(&text);
        let module = module_path(&src, f);
        let shown = f.strip_prefix(root).unwrap_or(f).display().to_string();
        let mut report = |t: &Token, what: String| {
            let source = lines.get(t.line - 1).map_or("", |l| l.trim());
            let entry = format!(
                "{shown}:{}:{}: uses {what}\n        {source}",
                t.line, t.col
            );
            if !problems.contains(&entry) {
                problems.push(entry);
            }
        };
        for (k, t) in tokens.iter().enumerate() {
            for rule in forbidden {
                match rule {
                    Forbidden::Crate(name) => {
                        if ident(&tokens, k) == Some(name) {
                            report(t, rule.describe());
                        }
                    }
                    Forbidden::Macro(name) => {
                        if ident(&tokens, k) == Some(name)
                            && is(&tokens, k + 1, &Tok::Punct('!'))
                            && !is(&tokens, k + 2, &Tok::Punct('='))
                        {
                            report(t, rule.describe());
                        }
                    }
                    Forbidden::Path(prefix) => {
                        let want: Vec<&str> = prefix.split("::").collect();
                        for p in paths_at(&tokens, k, &module) {
                            if p.len() >= want.len() && p.iter().zip(&want).all(|(a, b)| a == b) {
                                let named = if p.len() > want.len() {
                                    format!("{} (through `{}`)", rule.describe(), p.join("::"))
                                } else {
                                    rule.describe()
                                };
                                report(t, named);
                            }
                        }
                    }
                }
            }
        }
    }
    problems
}

/// Fail with every crossing of the layer, after the rule it breaks.
fn assert_no_crossings(dirs: &[&str], forbidden: &[Forbidden], rule: &str) {
    let problems = crossings(dirs, forbidden);
    let layer = dirs
        .iter()
        .map(|d| format!("{d}/**"))
        .collect::<Vec<_>>()
        .join(" and ");
    let items = forbidden
        .iter()
        .map(Forbidden::describe)
        .collect::<Vec<_>>()
        .join(", ");
    assert!(
        problems.is_empty(),
        "layer boundary crossed in {layer}: {} use(s) of forbidden items.\n\
         Rule: {rule}.\nForbidden there: {items}.\n{}",
        problems.len(),
        problems.join("\n")
    );
}

#[test]
fn analysis_and_matrix_are_pure() {
    let forbidden = [
        Forbidden::Crate("rusqlite"),
        Forbidden::Crate("refinery"),
        Forbidden::Crate("clap"),
        Forbidden::Crate("comfy_table"),
        Forbidden::Crate("indicatif"),
        Forbidden::Path("std::fs"),
        Forbidden::Macro("println"),
        Forbidden::Macro("eprintln"),
        Forbidden::Path("crate::store"),
        Forbidden::Path("crate::cli"),
        Forbidden::Path("crate::report"),
        Forbidden::Path("crate::workflow"),
    ];
    assert_no_crossings(
        &["src/analysis", "src/matrix"],
        &forbidden,
        "the kernels and the matrix layer are pure: no SQLite, command line, terminal, \
         files or upper layers",
    );
}

#[test]
fn workflow_has_no_command_line_printing_environment_or_process() {
    let forbidden = [
        Forbidden::Crate("clap"),
        Forbidden::Path("std::env"),
        Forbidden::Path("std::process"),
        Forbidden::Macro("println"),
        Forbidden::Macro("eprintln"),
        Forbidden::Macro("print"),
        Forbidden::Macro("eprint"),
        Forbidden::Crate("indicatif"),
        Forbidden::Crate("comfy_table"),
    ];
    assert_no_crossings(
        &["src/workflow"],
        &forbidden,
        "the workflow layer takes typed specs and reports through `Progress` and its \
         outcomes; arguments, environment, printing and exit codes belong to src/cli/",
    );
}

#[test]
fn the_archive_layer_speaks_no_sql_and_no_command_line() {
    let forbidden = [
        Forbidden::Crate("rusqlite"),
        Forbidden::Crate("clap"),
        Forbidden::Path("crate::cli"),
        Forbidden::Path("std::env"),
        Forbidden::Path("std::process"),
        Forbidden::Macro("println"),
        Forbidden::Macro("eprintln"),
        Forbidden::Macro("print"),
        Forbidden::Macro("eprint"),
    ];
    assert_no_crossings(
        &["src/dwca"],
        &forbidden,
        "the Darwin Core layer reads and writes archive files and reaches the store \
         through its exchange API (src/store/exchange.rs); SQL belongs to src/store/, \
         arguments and printing to src/cli/",
    );
}

#[test]
fn report_knows_no_store_or_command_line() {
    let forbidden = [
        Forbidden::Path("crate::store"),
        Forbidden::Path("crate::cli"),
        Forbidden::Crate("rusqlite"),
    ];
    assert_no_crossings(
        &["src/report"],
        &forbidden,
        "the report layer renders workflow outcomes; the store and the command line \
         are reached from src/cli/ only",
    );
}

#[test]
fn the_guard_sees_through_comments_strings_groups_and_super() {
    let src = r##"
        // use crate::store::Store;
        /* println!("x"); /* nested */ crate::cli */
        let s = "crate::store std::env println!";
        let r = r#"clap " rusqlite"#;
        let c = '"'; let l: &'static str = "";
        use std::{fmt, env};
        use crate::{analysis, store::Store};
        use super::super::cli::common;
        if a != b {}
        eprint!("x");
    "##;
    let tokens = lex(src);
    let module: Vec<String> = ["crate", "report", "text", "permanova"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    let mut paths = Vec::new();
    for k in 0..tokens.len() {
        for p in paths_at(&tokens, k, &module) {
            paths.push(p.join("::"));
        }
    }
    for want in ["std::env", "crate::store", "crate::report::cli::common"] {
        assert!(paths.iter().any(|p| p == want), "{want} not in {paths:?}");
    }
    assert!(!paths.iter().any(|p| p == "crate::cli"), "{paths:?}");
    let idents: Vec<&str> = (0..tokens.len())
        .filter_map(|k| ident(&tokens, k))
        .collect();
    for gone in ["clap", "rusqlite", "println", "nested"] {
        assert!(!idents.contains(&gone), "{gone} in {idents:?}");
    }
    assert!(idents.contains(&"eprint") && idents.contains(&"b"));
    // Two levels up from a file directly under src/report/ is the crate root.
    let tokens = lex("use super::super::cli; fn f(&self) { self.g() }");
    let module: Vec<String> = ["crate", "report", "html"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    let paths: Vec<String> = (0..tokens.len())
        .flat_map(|k| paths_at(&tokens, k, &module))
        .map(|p| p.join("::"))
        .collect();
    assert_eq!(paths, ["crate::cli"]);
}
