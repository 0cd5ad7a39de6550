"""Check tally's Darwin Core Archive export with an independent reader.

tally writes a sampling-event Darwin Core Archive (`tally export dwca`):
event.txt (Event core), occurrence.txt (Occurrence extension keyed by
eventID), meta.xml and eml.xml. This script builds a store from the demo data
(demo-data/*.csv), exports a selection of it, and reads the archive back with
python-dwca-reader (PyPI `python-dwca-reader`, import name `dwca`), a
general-purpose Darwin Core reader that knows nothing of tally. Only the
reader touches the archive: the script never opens the zip or the text files
itself, so meta.xml must describe the files well enough for a third-party
reader (delimiters, quoting, header lines, id/coreid columns, terms).

From what the reader returns it records in tests/reference/dwca_reader.json:
  source                   the reader;
  versions                 the reader's and Python's versions (not compared by regenerate --check);
  flags                    the selection flags of the export (FLAGS below);
  core_row_type            rowType of the core, as the reader reports it;
  extension_row_type       rowType of the (single) extension;
  core_terms               the core's terms, in column order, as short Darwin
                           Core names (the part after
                           http://rs.tdwg.org/dwc/terms/);
  extension_terms          the same for the extension;
  core_rows                number of core rows (events);
  extension_rows           number of extension rows (occurrences);
  unlinked_occurrences     extension rows whose core_id is no core row's id;
  individuals_per_event    eventID -> sum of individualCount over the event's
                           occurrence rows with occurrenceStatus "present"
                           (0 for an event with no presence);
  present_rows             occurrence rows with occurrenceStatus "present";
  absent_rows              occurrence rows with occurrenceStatus "absent" (the
                           script checks each has individualCount "0");
  events_without_presence  sorted eventIDs with no "present" row;
  title                    the EML dataset title (only when the reader exposes
                           the metadata as an element tree).

The JSON is read by the Rust integration test
`dwca::an_independent_reader_agrees_with_the_store` in
tests/integration/dwca.rs, which compares it with the store; `cargo test`
needs no Python.

The tally binary is $TALLY if set, else target/debug/tally after a quiet
`cargo build` in the repository root (two levels above this script).

Run from anywhere:
    python3 -m pip install python-dwca-reader
    python3 tests/reference/make_dwca_fixtures.py
"""
import json
import platform
import os
import pathlib
import subprocess
import sys
import tempfile

from dwca.read import DwCAReader

ROOT = pathlib.Path(__file__).resolve().parents[2]
OUT = pathlib.Path(__file__).resolve().with_name("dwca_reader.json")
DWC = "http://rs.tdwg.org/dwc/terms/"

# Selection flags of the export, recorded in the JSON so the Rust test can
# make the same selection from the store.
FLAGS = [
    "--site", "S01,S07",
    "--years", "2014..2016",
    "--absences",
    "--contact", "Wren Valley Trust <data@wren.example>",
    "--licence", "CC-BY-4.0",
]

IMPORTS = [  # in this order: taxa and protocols before the records that use them
    ("sites", "demo-data/sites.csv"),
    ("protocols", "demo-data/protocols.csv"),
    ("taxa", "demo-data/taxa.csv"),
    ("records", "demo-data/records.csv"),
]


def reader_version():
    try:
        from importlib.metadata import version
        return version("python-dwca-reader")
    except Exception:
        from dwca.version import __version__
        return __version__


def tally_binary():
    env = os.environ.get("TALLY")
    if env:
        return str(pathlib.Path(env).resolve())
    subprocess.run(["cargo", "build", "--quiet"], cwd=ROOT, check=True)
    return str(ROOT / "target" / "debug" / "tally")


def run(tally, cwd, *args):
    p = subprocess.run([tally, "--db", "t.db", *args], cwd=cwd,
                       capture_output=True, text=True)
    if p.returncode != 0:
        sys.stderr.write(p.stderr)
        sys.exit(f"tally {' '.join(args)} failed with status {p.returncode}")
    return p


def short(term):
    if not term.startswith(DWC):
        raise SystemExit(f"term {term!r} is not a Darwin Core term")
    return term[len(DWC):]


def terms_in_column_order(descriptor):
    fields = sorted(descriptor.fields,
                    key=lambda f: (f["index"] is None, int(f["index"] or 0)))
    return [short(f["term"]) for f in fields]


def read_archive(path):
    out = {}
    with DwCAReader(str(path)) as reader:
        core = reader.descriptor.core
        if len(reader.descriptor.extensions) != 1:
            raise SystemExit(f"expected one extension, the reader found "
                             f"{len(reader.descriptor.extensions)}")
        ext = reader.descriptor.extensions[0]
        out["core_row_type"] = core.type
        out["extension_row_type"] = ext.type
        out["core_terms"] = terms_in_column_order(core)
        out["extension_terms"] = terms_in_column_order(ext)

        core_rows = list(reader)
        ids = [r.id for r in core_rows]
        if len(set(ids)) != len(ids):
            raise SystemExit("duplicate eventIDs in the core")
        for r in core_rows:
            if r.data.get(DWC + "eventID") != r.id:
                raise SystemExit(f"core row {r.id}: eventID column differs from the id")
            dyn = r.data.get(DWC + "dynamicProperties", "")
            if dyn:
                # A quoted field with doubled quotes inside: the reader must
                # hand back the JSON itself.
                try:
                    json.loads(dyn)
                except ValueError as e:
                    raise SystemExit(f"core row {r.id}: dynamicProperties as read "
                                     f"is not JSON ({e}): {dyn!r}")

        ext_rows = list(reader.extension_files[0].iter_rows())

        out["core_rows"] = len(core_rows)
        out["extension_rows"] = len(ext_rows)
        id_set = set(ids)
        out["unlinked_occurrences"] = sum(1 for e in ext_rows if e.core_id not in id_set)
        # The reader's own linkage must agree with the core_id column.
        linked = sum(len(r.extensions) for r in core_rows)
        if linked != out["extension_rows"] - out["unlinked_occurrences"]:
            raise SystemExit(f"reader linked {linked} extension rows to core rows, "
                             f"core_id says {out['extension_rows'] - out['unlinked_occurrences']}")

        individuals = {i: 0 for i in ids}
        with_presence = set()
        present = absent = 0
        for e in ext_rows:
            status = e.data.get(DWC + "occurrenceStatus")
            count = e.data.get(DWC + "individualCount")
            if status == "present":
                present += 1
                with_presence.add(e.core_id)
                individuals[e.core_id] = individuals.get(e.core_id, 0) + int(count)
            elif status == "absent":
                absent += 1
                if count != "0":
                    raise SystemExit(f"absent row {e.data.get(DWC + 'occurrenceID')} "
                                     f"has individualCount {count!r}")
            else:
                raise SystemExit(f"occurrence row {e.position}: occurrenceStatus {status!r}")
        out["individuals_per_event"] = individuals
        out["present_rows"] = present
        out["absent_rows"] = absent
        out["events_without_presence"] = sorted(set(ids) - with_presence)

        meta = getattr(reader, "metadata", None)
        if meta is not None and hasattr(meta, "find"):
            t = meta.find(".//title")
            if t is not None and t.text is not None:
                out["title"] = t.text.strip()
    return out


def main():
    tally = tally_binary()
    with tempfile.TemporaryDirectory(prefix="tally-dwca-") as tmp:
        run(tally, tmp, "init")
        for kind, rel in IMPORTS:
            run(tally, tmp, "import", kind, str(ROOT / rel))
        run(tally, tmp, "export", "dwca", "a.zip", *FLAGS)
        result = read_archive(pathlib.Path(tmp) / "a.zip")
    result["source"] = "python-dwca-reader reading tally's export of the demo data"
    result["versions"] = {"python-dwca-reader": reader_version(),
                          "python": platform.python_version()}
    result["flags"] = FLAGS
    OUT.write_text(json.dumps(result, sort_keys=True, indent=1, ensure_ascii=False) + "\n",
                   encoding="utf-8")
    print(f"wrote {OUT.relative_to(ROOT)}: {result['core_rows']} events, "
          f"{result['extension_rows']} occurrences ({result['present_rows']} present, "
          f"{result['absent_rows']} absent), {result['unlinked_occurrences']} unlinked")


if __name__ == "__main__":
    main()
