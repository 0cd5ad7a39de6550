//! Re-run the build when a migration or embedded demo file changes (refinery embeds them).
fn main() {
    println!("cargo:rerun-if-changed=migrations");
    println!("cargo:rerun-if-changed=demo-data");
}
