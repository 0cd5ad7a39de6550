//! Field codes for taxa (docs/taxonomy.md, "Field codes"), end to end: a
//! records file naming taxa by their codes stores exactly what the same file
//! with names stores, and matrices show names; bad, duplicate and ambiguous
//! codes are refused; undoing a taxa batch removes its codes.
use serde_json::Value;

use crate::util::TestEnv;

const SITES: &str = "code,name,latitude,longitude\nA1,Upper pool,,\nA2,Lower pool,,\n";
const PROTOCOLS: &str = "code,description,effort_unit\nnet,dip net,minutes\n";
/// `Aquarius` (code AQU) is a synonym of `Gerris`: counted as Gerris.
const TAXA: &str = "name,rank,parent,accepted,code\nGerridae,family,,,\nGerris,genus,Gerridae,,GER\n\
                    Aquarius,genus,Gerridae,Gerris,aqu\nNotonecta,genus,,,NOT1\n";
const BY_NAME: &str = "site,date,protocol,effort,taxon,count\n\
                       A1,2019-05-01,net,2,Gerris,4\nA1,2019-05-01,net,2,Aquarius,3\n\
                       A1,2019-05-01,net,2,Notonecta,1\nA2,2020-05-02,net,2,Gerris,6\n\
                       A2,2020-05-02,net,2,Notonecta,5\n";
/// The same records, by code in any case (and one name kept).
const BY_CODE: &str = "site,date,protocol,effort,taxon,count\n\
                       A1,2019-05-01,net,2,GER,4\nA1,2019-05-01,net,2,Aqu,3\n\
                       A1,2019-05-01,net,2,not1,1\nA2,2020-05-02,net,2,Gerris,6\n\
                       A2,2020-05-02,net,2,NOT1,5\n";

fn store(records: &str) -> TestEnv {
    let env = TestEnv::new();
    env.stdout(["init"]);
    for (kind, text) in [
        ("sites", SITES),
        ("protocols", PROTOCOLS),
        ("taxa", TAXA),
        ("records", records),
    ] {
        let p = env.write(&format!("{kind}.csv"), text);
        env.stdout(["import", kind, p.to_str().unwrap()]);
    }
    env
}

/// The dump without `import_batch` (its rows name the file's hash).
fn dump_without_batches(env: &TestEnv) -> String {
    let mut keep = true;
    let mut out = String::new();
    for line in env.dump().lines() {
        if let Some(table) = line.strip_prefix("## ") {
            keep = table != "import_batch";
        }
        if keep {
            out.push_str(line);
            out.push('\n');
        }
    }
    out
}

#[test]
fn records_by_code_store_the_same_counts_and_matrices_show_names() {
    let named = store(BY_NAME);
    let coded = store(BY_CODE);
    assert_eq!(dump_without_batches(&coded), dump_without_batches(&named));
    let m = coded.stdout(["matrix", "--format", "json"]);
    assert_eq!(m, named.stdout(["matrix", "--format", "json"]));
    let v: Value = serde_json::from_str(&m).unwrap();
    assert_eq!(v["taxa"], serde_json::json!(["Gerris", "Notonecta"]));
    // Aquarius (3) is counted as Gerris (4) at A1: 7, as the names give it.
    assert_eq!(v["values"][0], serde_json::json!([7.0, 1.0]));
    let csv = coded.stdout(["matrix", "--format", "csv"]);
    for code in ["GER", "AQU", "NOT1"] {
        assert!(!csv.contains(code), "{csv}");
    }
    // A code matching nothing is an unknown taxon, with line and column.
    let p = coded.write(
        "bad.csv",
        "site,date,protocol,effort,taxon,count\nA1,2021-05-01,net,2,GERX,1\n",
    );
    let (code, _, err) = coded.run(["import", "records", p.to_str().unwrap()]);
    assert_eq!(code, 1, "{err}");
    assert!(
        err.contains("line 2, column taxon: taxon 'GERX' is not in the store"),
        "{err}"
    );
}

#[test]
fn taxa_list_shows_codes_and_taxa_code_adds_removes_and_refuses() {
    let env = store(BY_NAME);
    let csv = env.stdout(["taxa", "list", "--format", "csv"]);
    assert!(csv.starts_with("name,rank,parent,accepted,codes,"), "{csv}");
    assert!(
        csv.contains("\nAquarius,genus,Gerridae,Gerris,AQU,"),
        "{csv}"
    );
    let before = env.dump();
    for (args, want) in [
        (["Notonecta", "ger"], "GER is the code of 'Gerris' already"),
        (
            ["Notonecta", "gerris"],
            "GERRIS reads like the taxon name 'Gerris'",
        ),
        (
            ["Notonecta", "NOTONEC"],
            "a code has 2 to 6 letters or digits",
        ),
        (["Notonecta", "NO-T"], "holds '-'"),
        (["Nepa", "NEP"], "taxon (name or code) 'Nepa' not found"),
    ] {
        let (code, _, err) = env.run(["taxa", "code", args[0], args[1]]);
        assert_eq!(code, 1, "{err}");
        assert!(err.contains(want), "{args:?}: {err}");
    }
    assert_eq!(env.dump(), before);
    env.stdout(["taxa", "code", "NOT1", "noto"]);
    let v: Value = serde_json::from_str(&env.stdout(["taxa", "list", "--format", "json"])).unwrap();
    let noto = v
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["name"] == "Notonecta")
        .unwrap();
    assert_eq!(noto["codes"], serde_json::json!(["NOT1", "NOTO"]));
    // A command naming a taxon by code records the name.
    env.stdout([
        "taxa",
        "rename",
        "noto",
        "Notonecta s.l.",
        "--reason",
        "test",
    ]);
    let h = env.stdout(["taxa", "history", "--format", "csv"]);
    assert!(h.contains("rename,Notonecta,Notonecta s.l.,"), "{h}");
    // A new name that reads like a code is refused.
    let (code, _, err) = env.run(["taxa", "rename", "Gerridae", "Noto", "--reason", "test"]);
    assert_eq!(code, 1);
    assert!(
        err.contains("'Noto' is the field code NOTO of 'Notonecta s.l.'"),
        "{err}"
    );
    env.stdout(["taxa", "code", "Notonecta s.l.", "NOTO", "--remove"]);
    let (code, _, err) = env.run(["taxa", "code", "Notonecta s.l.", "NOTO", "--remove"]);
    assert_eq!(code, 1);
    assert!(
        err.contains("NOTO is not a code of 'Notonecta s.l.' (its codes are NOT1)"),
        "{err}"
    );
}

#[test]
fn bad_codes_in_a_taxa_file_are_refused_with_line_and_column() {
    let env = store(BY_NAME);
    let before = env.dump();
    let p = env.write(
        "more.csv",
        "name,rank,parent,accepted,code\nNepa,genus,,,NEPACINE\nRanatra,genus,,,RA!\n\
         Hydrometra,genus,,,GER\nVelia,genus,,,velia\nMicrovelia,genus,,,MIC\nMesovelia,genus,,,MIC\n",
    );
    let (code, _, err) = env.run(["import", "taxa", p.to_str().unwrap()]);
    assert_eq!(code, 1, "{err}");
    for want in [
        "line 2, column code: 'NEPACINE' is 8 character(s) long",
        "line 3, column code: 'RA!' holds '!'",
        "line 4, column code: GER is the code of 'Gerris' already (batch 3)",
        "line 5, column code: VELIA reads like the taxon name 'Velia'",
        "line 7, column code: field code 'MIC' is listed twice (first on line 6)",
    ] {
        assert!(err.contains(want), "{want}: {err}");
    }
    assert_eq!(env.dump(), before);
}

#[test]
fn undoing_a_taxa_batch_removes_its_codes() {
    let env = TestEnv::new();
    env.stdout(["init"]);
    let empty = env.dump();
    let p = env.write("taxa.csv", TAXA);
    let (code, _, err) = env.run(["import", "taxa", p.to_str().unwrap()]);
    assert_eq!(code, 0, "{err}");
    assert!(err.contains("4 new taxa, 3 field codes"), "{err}");
    env.stdout(["taxa", "code", "Gerridae", "GERR"]);
    let (code, _, err) = env.run(["batches", "undo", "1"]);
    assert_eq!(code, 1);
    assert!(
        err.contains("GERR (Gerridae) were added with `tally taxa code`"),
        "{err}"
    );
    env.stdout(["taxa", "code", "GERR", "GERR", "--remove"]);
    let out = env.stdout(["batches", "undo", "1"]);
    assert!(
        out.contains("4 taxa") && out.contains("3 field codes"),
        "{out}"
    );
    assert_eq!(env.dump(), empty);
}
