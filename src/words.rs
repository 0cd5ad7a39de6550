//! Plain words every layer may use: a count with its noun in the right number
//! ("1 site", "3 sites", "1 taxon", "2 taxa"), so no message says "site(s)".

/// `n` and the noun for that number: `one` for 1, `many` otherwise.
///
/// # Examples
/// ```
/// use tally::words::count;
/// assert_eq!(count(1_usize, "taxon", "taxa"), "1 taxon");
/// assert_eq!(count(0_i64, "row", "rows"), "0 rows");
/// ```
pub fn count<T: std::fmt::Display + PartialEq + From<u8>>(n: T, one: &str, many: &str) -> String {
    let word = noun(&n, one, many);
    format!("{n} {word}")
}

/// The noun for `n`: `one` for 1, `many` otherwise.
pub fn noun<'a, T: PartialEq + From<u8>>(n: &T, one: &'a str, many: &'a str) -> &'a str {
    if *n == T::from(1) { one } else { many }
}
