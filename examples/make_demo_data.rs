//! Writes the invented Wren Valley demo data into `demo-data/`.
//!
//! Run from the repository root: `cargo run --example make_demo_data`. The
//! output is deterministic (fixed seed), so rerunning reproduces the committed
//! files; a test checks this.
use std::path::Path;

fn main() -> std::io::Result<()> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data");
    std::fs::create_dir_all(&dir)?;
    let files = tally::demo::generate();
    for (name, content) in files.files() {
        let path = dir.join(name);
        std::fs::write(&path, content)?;
        println!("wrote {} ({} bytes)", path.display(), content.len());
    }
    Ok(())
}
