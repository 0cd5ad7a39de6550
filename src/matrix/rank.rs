//! The rank order (highest first) and the level of a rank in it: the one list,
//! used by roll-up (`--rank`, taxa recorded above the rank), by the taxonomy
//! rules (`crate::store::taxa::integrity`) and by archive imports. The order is
//! documented in docs/taxonomy.md, "The rank order".

/// The rank order, highest first; names on one line are the same level
/// (compared trimmed and case-insensitively). A rank not listed here (or empty)
/// is *unknown* and takes no part in the rank rule. Common practice of the
/// zoological and botanical codes, no single source.
pub const RANKS: &[&[&str]] = &[
    &["domain"],
    &["kingdom"],
    &["subkingdom"],
    &["phylum", "division"],
    &["subphylum", "subdivision"],
    &["superclass"],
    &["class"],
    &["subclass"],
    &["infraclass"],
    &["superorder"],
    &["order"],
    &["suborder"],
    &["infraorder"],
    &["superfamily"],
    &["family"],
    &["subfamily"],
    &["tribe"],
    &["subtribe"],
    &["genus"],
    &["subgenus"],
    &["species"],
    &["subspecies"],
    &["variety"],
    &["form"],
];

/// The level of a rank in [`RANKS`] (0 = highest), or `None` when unknown.
pub fn rank_level(rank: &str) -> Option<usize> {
    let r = rank.trim().to_ascii_lowercase();
    RANKS.iter().position(|names| names.contains(&r.as_str()))
}
