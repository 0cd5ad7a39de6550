//! The rules a taxonomy keeps, checked on an in-memory copy of the taxon table
//! (no SQL here): `tally check` lists the problems of the stored taxonomy, and
//! every rename, merge, move and undo is tried on a copy first and refused when
//! it would add a problem (docs/taxonomy.md).
//!
//! Roll-up (`--rank`) walks from a taxon to its accepted name when it is a
//! synonym, and from an accepted taxon to its parent; that walk must end. The
//! rules:
//!
//! 1. no loop in that walk (a *synonym loop* when it follows only accepted
//!    names, a *parent loop* otherwise), and no loop in the parent links alone;
//! 2. a synonym points at an accepted name, not at another synonym;
//! 3. along the walk, each accepted taxon of a known rank sits below a taxon of a
//!    higher rank: its nearest accepted ancestor of known rank ranks above it
//!    ([`RANKS`]).

use std::collections::{BTreeMap, BTreeSet};

pub use crate::matrix::rank::{RANKS, rank_level};

/// One taxon as the rules see it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Node {
    /// Taxon id.
    pub id: i64,
    /// Name.
    pub name: String,
    /// Rank (free text; may be empty).
    pub rank: String,
    /// Parent id.
    pub parent: Option<i64>,
    /// Accepted id, when a synonym.
    pub accepted: Option<i64>,
}

/// A copy of the taxon table.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Taxonomy {
    nodes: BTreeMap<i64, Node>,
}

/// How a chain goes from one taxon to the next.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
enum Via {
    /// The roll-up walk: accepted name of a synonym, parent of an accepted taxon.
    Walk,
    /// Parent links only.
    Parent,
}

/// What kind of problem.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum ProblemKind {
    /// The walk or the parent links loop (through at least one parent link).
    ParentLoop,
    /// The accepted names loop.
    SynonymLoop,
    /// A synonym points at a synonym.
    SynonymOfSynonym,
    /// A taxon sits below one of the same or a lower rank.
    RankOrder,
}

/// One problem of a taxonomy, with the chain of taxa it concerns.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Problem {
    /// The kind.
    pub kind: ProblemKind,
    /// The chain, as taxon ids, first to last (a loop repeats its first at the end).
    chain: Vec<i64>,
    via: Via,
    /// The chain in words: `Baetis rhodani → parent Baetis → accepted Baetis rhodani`.
    pub text: String,
}

impl Problem {
    /// The identity of a problem, independent of names and of where a loop is entered.
    fn key(&self) -> (ProblemKind, Via, Vec<i64>) {
        let mut ids = self.chain.clone();
        if self.is_loop() {
            ids.pop();
            ids.sort_unstable();
        }
        (self.kind, self.via, ids)
    }

    /// True for the loop kinds.
    pub fn is_loop(&self) -> bool {
        matches!(
            self.kind,
            ProblemKind::ParentLoop | ProblemKind::SynonymLoop
        )
    }

    /// The taxon ids the problem concerns.
    pub fn taxa(&self) -> &[i64] {
        &self.chain
    }

    /// What a change would make: `a loop: A → parent B → accepted A`.
    pub fn consequence(&self) -> String {
        match self.kind {
            ProblemKind::ParentLoop | ProblemKind::SynonymLoop => format!("a loop: {}", self.text),
            ProblemKind::SynonymOfSynonym => format!(
                "a synonym of a synonym: {} (a synonym must point at an accepted name)",
                self.text
            ),
            ProblemKind::RankOrder => format!("ranks out of order: {}", self.text),
        }
    }
}

impl std::fmt::Display for Problem {
    /// The line `tally check` prints.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.kind {
            ProblemKind::ParentLoop => write!(f, "parent loop: {}", self.text),
            ProblemKind::SynonymLoop => write!(f, "synonym loop: {}", self.text),
            ProblemKind::SynonymOfSynonym => write!(
                f,
                "synonym of a synonym: {} (a synonym must point at an accepted name)",
                self.text
            ),
            ProblemKind::RankOrder => write!(f, "ranks out of order: {}", self.text),
        }
    }
}

impl Taxonomy {
    /// A taxonomy of these taxa.
    pub fn new(nodes: impl IntoIterator<Item = Node>) -> Taxonomy {
        Taxonomy {
            nodes: nodes.into_iter().map(|n| (n.id, n)).collect(),
        }
    }

    /// A taxon by id.
    pub fn get(&self, id: i64) -> Option<&Node> {
        self.nodes.get(&id)
    }

    /// A taxon by id, to change it (when trying a change on a copy).
    pub fn get_mut(&mut self, id: i64) -> Option<&mut Node> {
        self.nodes.get_mut(&id)
    }

    /// Every taxon, by id.
    pub fn nodes(&self) -> impl Iterator<Item = &Node> {
        self.nodes.values()
    }

    fn name(&self, id: i64) -> String {
        self.get(id)
            .map_or_else(|| format!("#{id}"), |n| n.name.clone())
    }

    /// The next taxon of a chain (a missing id ends it; the foreign-key check reports those).
    fn next(&self, id: i64, via: Via) -> Option<i64> {
        let n = self.get(id)?;
        let next = match via {
            Via::Walk => n.accepted.or(n.parent),
            Via::Parent => n.parent,
        }?;
        self.get(next).map(|_| next)
    }

    /// The accepted name of `id`: itself, or the end of its synonym chain;
    /// `None` when that chain loops.
    pub fn accepted(&self, id: i64) -> Option<i64> {
        let mut cur = id;
        for _ in 0..=self.nodes.len() {
            match self.get(cur).and_then(|n| n.accepted) {
                Some(a) if self.get(a).is_some() => cur = a,
                _ => return Some(cur),
            }
        }
        None
    }

    /// The parent of an accepted taxon as roll-up sees it: the accepted name of
    /// its parent. `None` at the top, or when the parent's synonym chain loops.
    pub fn effective_parent(&self, id: i64) -> Option<i64> {
        let p = self.get(id)?.parent?;
        self.get(p)?;
        self.accepted(p)
    }

    /// Words for a chain of ids: `A → parent B → accepted C`; `with_ranks`
    /// adds the rank of each accepted taxon (a synonym's rank is not used).
    fn chain_text(&self, chain: &[i64], via: Via, with_ranks: bool) -> String {
        let label = |id: i64| {
            let name = self.name(id);
            match self.get(id) {
                Some(n) if with_ranks && n.accepted.is_none() && !n.rank.trim().is_empty() => {
                    format!("{name} ({})", n.rank.trim())
                }
                _ => name,
            }
        };
        let mut s = String::new();
        for (i, &id) in chain.iter().enumerate() {
            if i > 0 {
                let prev = chain[i - 1];
                let step = match via {
                    Via::Walk if self.get(prev).is_some_and(|n| n.accepted.is_some()) => "accepted",
                    _ => "parent",
                };
                s.push_str(&format!(" → {step} "));
            }
            s.push_str(&label(id));
        }
        s
    }

    /// Every loop of the chains `via`, each entered at its first accepted
    /// taxon in name order (else its first name).
    fn loops(&self, via: Via) -> Vec<Vec<i64>> {
        // Each taxon has at most one next taxon, so every loop is found by
        // walking from each taxon once (0 = unseen, 1 = on this walk, 2 = done).
        let mut state: BTreeMap<i64, u8> = BTreeMap::new();
        let mut out = Vec::new();
        for &start in self.nodes.keys() {
            if state.contains_key(&start) {
                continue;
            }
            let mut path = Vec::new();
            let mut cur = Some(start);
            while let Some(id) = cur {
                match state.get(&id) {
                    Some(1) => {
                        let at = path.iter().position(|&p| p == id).expect("on this walk");
                        out.push(self.enter(&path[at..]));
                        break;
                    }
                    Some(_) => break,
                    None => {
                        state.insert(id, 1);
                        path.push(id);
                        cur = self.next(id, via);
                    }
                }
            }
            for id in path {
                state.insert(id, 2);
            }
        }
        out
    }

    /// A loop rotated to start at its preferred member, with the start repeated at the end.
    fn enter(&self, cycle: &[i64]) -> Vec<i64> {
        let pick = cycle
            .iter()
            .enumerate()
            .min_by_key(|(_, id)| {
                let n = self.get(**id);
                (
                    n.is_some_and(|n| n.accepted.is_some()),
                    n.map(|n| n.name.clone()),
                )
            })
            .map_or(0, |(i, _)| i);
        let mut v: Vec<i64> = cycle[pick..]
            .iter()
            .chain(&cycle[..pick])
            .copied()
            .collect();
        v.push(v[0]);
        v
    }

    /// Enter a loop of `p` at `id` when `id` is on it (to name a loop from
    /// the taxon a change is about).
    pub fn enter_at(&self, p: &mut Problem, id: i64) {
        if !p.is_loop() {
            return;
        }
        let cycle = &p.chain[..p.chain.len() - 1];
        let Some(at) = cycle.iter().position(|&c| c == id) else {
            return;
        };
        let mut chain: Vec<i64> = cycle[at..].iter().chain(&cycle[..at]).copied().collect();
        chain.push(id);
        p.text = self.chain_text(&chain, p.via, false);
        p.chain = chain;
    }

    /// Every problem, loops first, then synonyms of synonyms, then rank order.
    pub fn problems(&self) -> Vec<Problem> {
        let mut out = Vec::new();
        let mut in_loop: BTreeSet<i64> = BTreeSet::new();
        for chain in self.loops(Via::Walk) {
            let synonyms_only = chain[..chain.len() - 1]
                .iter()
                .all(|&id| self.get(id).is_some_and(|n| n.accepted.is_some()));
            in_loop.extend(chain.iter().copied());
            out.push(Problem {
                kind: if synonyms_only {
                    ProblemKind::SynonymLoop
                } else {
                    ProblemKind::ParentLoop
                },
                text: self.chain_text(&chain, Via::Walk, false),
                chain,
                via: Via::Walk,
            });
        }
        // A loop of parent links through accepted taxa only is a loop of the walk
        // too (reported above); one through a synonym is not walked today, but
        // would be as soon as the synonym is accepted again.
        for chain in self.loops(Via::Parent) {
            if chain
                .iter()
                .any(|&id| self.get(id).is_some_and(|n| n.accepted.is_some()))
            {
                out.push(Problem {
                    kind: ProblemKind::ParentLoop,
                    text: self.chain_text(&chain, Via::Parent, false),
                    chain,
                    via: Via::Parent,
                });
            }
        }
        for n in self.nodes.values() {
            let Some(a) = n.accepted else { continue };
            if in_loop.contains(&n.id) {
                continue;
            }
            if let Some(aa) = self.get(a).and_then(|t| t.accepted)
                && self.get(aa).is_some()
            {
                let chain = vec![n.id, a, aa];
                out.push(Problem {
                    kind: ProblemKind::SynonymOfSynonym,
                    text: self.chain_text(&chain, Via::Walk, false),
                    chain,
                    via: Via::Walk,
                });
            }
        }
        for n in self.nodes.values() {
            if n.accepted.is_some() || in_loop.contains(&n.id) {
                continue;
            }
            let Some(level) = rank_level(&n.rank) else {
                continue;
            };
            // Up the walk to the nearest accepted taxon of known rank.
            let mut chain = vec![n.id];
            let mut cur = n.id;
            let mut above = None;
            while let Some(next) = self.next(cur, Via::Walk) {
                if chain.contains(&next) || in_loop.contains(&next) {
                    break;
                }
                chain.push(next);
                cur = next;
                let t = &self.nodes[&next];
                if t.accepted.is_none()
                    && let Some(l) = rank_level(&t.rank)
                {
                    above = Some(l);
                    break;
                }
            }
            if above.is_some_and(|l| l >= level) {
                out.push(Problem {
                    kind: ProblemKind::RankOrder,
                    text: self.chain_text(&chain, Via::Walk, true),
                    chain,
                    via: Via::Walk,
                });
            }
        }
        out.sort_by(|a, b| (a.kind, a.via, &a.text).cmp(&(b.kind, b.via, &b.text)));
        out
    }

    /// The problems of `after` that `self` does not have (a problem is the same
    /// when it concerns the same taxa, whatever their names).
    pub fn new_problems(&self, after: &Taxonomy) -> Vec<Problem> {
        let before: BTreeSet<_> = self.problems().iter().map(Problem::key).collect();
        after
            .problems()
            .into_iter()
            .filter(|p| !before.contains(&p.key()))
            .collect()
    }
}

/// The refusal of a change that would add `problems` (loops first), naming each chain;
/// `None` when there are none.
pub fn refusal(action: &str, problems: &[Problem]) -> Option<String> {
    const SHOWN: usize = 3;
    let first = problems.first()?;
    let mut s = format!("{action} would make {}", first.consequence());
    for p in problems.iter().skip(1).take(SHOWN - 1) {
        s.push_str(&format!("; and {}", p.consequence()));
    }
    if problems.len() > SHOWN {
        s.push_str(&format!("; and {} more problem(s)", problems.len() - SHOWN));
    }
    s.push_str("; nothing was changed");
    Some(s)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn node(id: i64, name: &str, rank: &str, parent: Option<i64>, accepted: Option<i64>) -> Node {
        Node {
            id,
            name: name.into(),
            rank: rank.into(),
            parent,
            accepted,
        }
    }

    /// Baetidae > Baetis > three species (the defect report's shape).
    fn baetis() -> Taxonomy {
        Taxonomy::new([
            node(1, "Baetidae", "family", None, None),
            node(2, "Baetis", "genus", Some(1), None),
            node(3, "Baetis rhodani", "species", Some(2), None),
            node(4, "Baetis muticus", "species", Some(2), None),
            node(5, "Baetis vernus", "species", Some(2), None),
        ])
    }

    #[test]
    fn rank_order_is_one_list() {
        assert!(rank_level("Genus") < rank_level(" species "));
        assert_eq!(rank_level("phylum"), rank_level("Division"));
        assert_eq!(rank_level("species group"), None);
        assert_eq!(rank_level(""), None);
    }

    #[test]
    fn a_sound_taxonomy_has_no_problems() {
        assert!(baetis().problems().is_empty());
    }

    #[test]
    fn a_genus_merged_into_its_own_species_is_a_named_loop() {
        let before = baetis();
        let mut after = before.clone();
        after.get_mut(2).unwrap().accepted = Some(3);
        let new = before.new_problems(&after);
        assert!(new[0].is_loop(), "{new:?}");
        assert_eq!(
            new[0].text,
            "Baetis rhodani → parent Baetis → accepted Baetis rhodani"
        );
        // The other species hang off the loop: it is the one problem named.
        assert_eq!(new.len(), 1, "{new:?}");
        let msg = refusal("merging Baetis into Baetis rhodani", &new).unwrap();
        assert!(
            msg.starts_with(
                "merging Baetis into Baetis rhodani would make a loop: \
                 Baetis rhodani → parent Baetis → accepted Baetis rhodani"
            ),
            "{msg}"
        );
    }

    #[test]
    fn a_genus_merged_into_another_genus_species_puts_ranks_out_of_order() {
        let before = Taxonomy::new(baetis().nodes().cloned().chain([
            node(6, "Ecdyonurus", "genus", None, None),
            node(7, "Ecdyonurus venosus", "species", Some(6), None),
        ]));
        let mut after = before.clone();
        after.get_mut(2).unwrap().accepted = Some(7);
        let lines: Vec<String> = before
            .new_problems(&after)
            .iter()
            .map(ToString::to_string)
            .collect();
        assert_eq!(
            lines,
            [
                "ranks out of order: Baetis muticus (species) → parent Baetis → accepted \
                 Ecdyonurus venosus (species)",
                "ranks out of order: Baetis rhodani (species) → parent Baetis → accepted \
                 Ecdyonurus venosus (species)",
                "ranks out of order: Baetis vernus (species) → parent Baetis → accepted \
                 Ecdyonurus venosus (species)",
            ]
        );
    }

    #[test]
    fn loops_of_every_kind_are_found_once() {
        let t = Taxonomy::new([
            node(1, "A", "", Some(2), None),
            node(2, "B", "", Some(1), None),
            node(3, "C", "", None, Some(4)),
            node(4, "D", "", None, Some(3)),
            node(5, "E", "", Some(6), Some(7)),
            node(6, "F", "", Some(5), None),
            node(7, "G", "", None, None),
        ]);
        let p = t.problems();
        let lines: Vec<String> = p.iter().map(ToString::to_string).collect();
        assert_eq!(
            lines,
            [
                "parent loop: A → parent B → parent A",
                // E is a synonym of G, so the walk does not loop; its parent links do.
                "parent loop: F → parent E → parent F",
                "synonym loop: C → accepted D → accepted C",
            ]
        );
    }

    #[test]
    fn synonyms_of_synonyms_and_ranks_out_of_order_are_named() {
        let t = Taxonomy::new([
            node(1, "Baetidae", "family", None, None),
            node(2, "Baetis", "genus", Some(1), None),
            node(3, "Old", "", None, Some(2)),
            node(4, "Older", "", None, Some(3)),
            node(5, "Odd", "", Some(2), None),
            node(6, "Wrong", "family", Some(5), None),
        ]);
        let lines: Vec<String> = t.problems().iter().map(ToString::to_string).collect();
        assert_eq!(
            lines,
            [
                "synonym of a synonym: Older → accepted Old → accepted Baetis \
                 (a synonym must point at an accepted name)",
                "ranks out of order: Wrong (family) → parent Odd → parent Baetis (genus)",
            ]
        );
    }

    #[test]
    fn a_rename_keeps_an_old_problem_old() {
        let before = Taxonomy::new([
            node(1, "A", "", Some(2), None),
            node(2, "B", "", Some(1), None),
        ]);
        let mut after = before.clone();
        after.get_mut(1).unwrap().name = "A2".into();
        assert!(before.new_problems(&after).is_empty());
        assert_eq!(after.problems().len(), 1);
    }
}
