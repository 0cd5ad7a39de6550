//! One overwrite rule for every command that writes a file (`report --out`,
//! `ordinate --plot`, `backup`): an existing file is replaced only with
//! `--force`; without it the command exits 1 before any work, the file keeps its
//! bytes and the store is unchanged (dumped before and after).

use crate::util::TestEnv;

const SEL: [&str; 5] = ["--protocol", "kick", "--per-effort", "--unit", "site-year"];

#[test]
fn existing_files_are_kept_unless_forced() {
    let env = TestEnv::with_demo_data();
    let keep = env.write("keep.svg", "the analyst's own notes\n");
    let keep_s = keep.to_string_lossy().to_string();
    let commands: Vec<Vec<&str>> = vec![
        [
            vec!["report", "--by", "reach", "--out", keep_s.as_str()],
            SEL.to_vec(),
            vec!["--permutations", "19", "--seed", "1"],
        ]
        .concat(),
        [
            vec![
                "ordinate",
                "--method",
                "ca",
                "--by",
                "reach",
                "--plot",
                keep_s.as_str(),
            ],
            SEL.to_vec(),
        ]
        .concat(),
        vec!["backup", keep_s.as_str()],
    ];
    for args in &commands {
        let before = env.dump();
        let (code, out, err) = env.run(args);
        assert_eq!(code, 1, "{args:?}: {out}{err}");
        assert!(
            err.contains("--force") && err.contains("nothing was written"),
            "{err}"
        );
        assert_eq!(
            std::fs::read_to_string(&keep).unwrap(),
            "the analyst's own notes\n",
            "{args:?} touched the file"
        );
        assert_eq!(before, env.dump(), "{args:?} changed the store");
    }
    // With --force each replaces the file.
    for args in &commands {
        let mut forced = args.clone();
        forced.push("--force");
        let (code, _, err) = env.run(&forced);
        assert_eq!(code, 0, "{forced:?}: {err}");
        assert_ne!(
            std::fs::read_to_string(&keep).unwrap_or_default(),
            "the analyst's own notes\n"
        );
    }
    // The forced backup is a store holding the same data.
    let copy = tally::store::Store::open(&keep)
        .expect("the backup opens as a store")
        .content_dump()
        .expect("dump");
    assert_eq!(copy, env.dump());
    // A backup onto the store itself is refused even with --force.
    let own = env.db.to_string_lossy().to_string();
    let before = env.dump();
    let (code, _, err) = env.run(["backup", own.as_str(), "--force"]);
    assert_eq!(code, 1, "{err}");
    assert!(err.contains("is the store; nothing was written"), "{err}");
    assert_eq!(before, env.dump());
}

#[test]
fn plots_are_svg_files_or_nothing_is_written() {
    // tally draws SVG: a plot name with another extension is refused before any
    // work, whichever command draws it.
    let env = TestEnv::with_demo_data();
    let png = env.path("plot.png");
    let png_s = png.to_string_lossy().to_string();
    let commands: Vec<Vec<&str>> = vec![
        [
            vec!["ordinate", "--method", "ca", "--plot", png_s.as_str()],
            SEL.to_vec(),
        ]
        .concat(),
        [
            vec!["diversity", "--plot", png_s.as_str()],
            SEL[..2].to_vec(),
        ]
        .concat(),
        [
            vec!["trend", "--plot-taxa", png_s.as_str()],
            SEL[..3].to_vec(),
        ]
        .concat(),
    ];
    for args in &commands {
        let before = env.dump();
        let (code, _, err) = env.run(args);
        assert_eq!(code, 1, "{args:?}: {err}");
        assert!(
            err.contains("tally draws SVG") && err.contains("nothing was written"),
            "{err}"
        );
        assert!(!png.exists(), "{args:?} wrote the file");
        assert_eq!(before, env.dump(), "{args:?} changed the store");
    }
}
