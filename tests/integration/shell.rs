//! `tally completions` and `tally manual`: generated from the command
//! definitions, so every command and flag is in them.

use crate::util::TestEnv;

/// Every command `tally --help` lists (the lines under "Commands:").
fn commands(env: &TestEnv) -> Vec<String> {
    let help = env.stdout(["--help"]);
    help.lines()
        .skip_while(|l| !l.starts_with("Commands:"))
        .skip(1)
        .take_while(|l| l.starts_with("  "))
        .filter_map(|l| l.split_whitespace().next().map(String::from))
        .filter(|c| c != "help")
        .collect()
}

#[test]
fn completions_cover_every_command_and_parse_in_bash() {
    let env = TestEnv::new();
    let names = commands(&env);
    assert!(names.len() > 20, "{names:?}");
    for shell in ["bash", "zsh", "fish", "powershell", "elvish"] {
        let script = env.stdout(["completions", shell]);
        for c in &names {
            assert!(script.contains(c.as_str()), "{shell}: {c}");
        }
        assert!(script.contains("--by-taxon"), "{shell}");
    }
    // bash itself reads the script without a syntax error (bash -n).
    let path = env.write("tally.bash", &env.stdout(["completions", "bash"]));
    let status = std::process::Command::new("bash")
        .arg("-n")
        .arg(&path)
        .status()
        .expect("bash runs");
    assert!(status.success());
    let (code, _, err) = env.run(["completions", "tcsh"]);
    assert_eq!(code, 2, "{err}");
}

#[test]
fn the_manual_has_a_section_for_every_command() {
    let env = TestEnv::new();
    let page = env.stdout(["manual"]);
    assert!(page.contains(".TH tally 1"), "{}", &page[..300]);
    for c in commands(&env) {
        let heading = format!(".SH \"TALLY {}\"", c.to_uppercase());
        assert!(page.contains(&heading), "{heading}");
    }
    // Flags of a command appear under it.
    let trend = page.split(".SH \"TALLY TREND\"").nth(1).unwrap();
    let trend = trend.split(".SH \"").next().unwrap();
    assert!(trend.contains("by\\-taxon"), "{trend}");
}
