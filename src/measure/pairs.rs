//! Which site of one model corresponds to which site of another.

use std::collections::{HashMap, HashSet};

use super::result::UnmatchedSite;
use crate::catalog::fit::Fitted;
use crate::onnx::ModelIndex;
use crate::scan::{self, Site};

/// A site of the original model and its counterpart in the rewritten one.
#[derive(Debug, Clone)]
pub struct SitePair {
    pub a: Site,
    pub b: Site,
    /// The fit `b` computes when it is a fitted form of `a`'s kind: bounds are the fit's.
    pub fit: Option<Fitted>,
}

/// For two models compared as files: both are scanned and sites are matched by graph and output
/// tensor (a rewrite keeps a site's output name), in the original's order; the sites left
/// unmatched on either side come second.
pub fn by_output(
    original: &ModelIndex,
    rewritten: &ModelIndex,
) -> (Vec<SitePair>, Vec<UnmatchedSite>) {
    let sites_a = scan::scan(original).sites;
    let sites_b = scan::scan(rewritten).sites;
    let by_output: HashMap<(&str, &str), &Site> = sites_b
        .iter()
        .map(|s| ((s.graph.as_str(), s.output.as_str()), s))
        .collect();
    let mut matched: HashSet<&str> = HashSet::new();
    let mut pairs = Vec::new();
    let mut unmatched = Vec::new();
    for sa in &sites_a {
        match by_output.get(&(sa.graph.as_str(), sa.output.as_str())) {
            Some(sb) => {
                matched.insert(sb.id.as_str());
                pairs.push(SitePair {
                    a: sa.clone(),
                    b: (*sb).clone(),
                    fit: None,
                });
            }
            None => unmatched.push(UnmatchedSite::of("a", sa)),
        }
    }
    for sb in sites_b.iter().filter(|s| !matched.contains(s.id.as_str())) {
        unmatched.push(UnmatchedSite::of("b", sb));
    }
    (pairs, unmatched)
}
