//! What to convert to: `--to` requests or a target profile, and the sites asked for.

use std::path::Path;

use anyhow::{Result, bail};

use crate::measure::{Budgets, DEFAULT_BUDGET};
use crate::onnx::ModelIndex;
use crate::plan::profile::Profile;
use crate::plan::ranges::FitRanges;
use crate::plan::request::Request;
use crate::plan::{Plan, Policy};
use crate::scan::{self, Site};

/// Parsed requests or profile, checked before any model is read.
#[derive(Debug, Clone)]
pub struct Conversion {
    requests: Vec<Request>,
    profile: Option<Profile>,
    sites: Vec<String>,
    /// Declared fitting ranges (`--fit-range`).
    ranges: FitRanges,
}

impl Conversion {
    /// Requests or a profile (one of them is required), and the site ids to keep (all when
    /// empty).
    pub fn new(
        requests: Vec<Request>,
        profile: Option<Profile>,
        sites: Vec<String>,
    ) -> Result<Conversion> {
        if requests.is_empty() && profile.is_none() {
            bail!("say what to convert to: --to KIND=FORM (repeatable) or --target PROFILE");
        }
        Ok(Conversion {
            requests,
            profile,
            sites,
            ranges: FitRanges::default(),
        })
    }

    /// The same conversion with declared fitting ranges.
    pub fn with_fit_ranges(mut self, ranges: FitRanges) -> Conversion {
        self.ranges = ranges;
        self
    }

    /// The declared fitting ranges.
    pub fn fit_ranges(&self) -> &FitRanges {
        &self.ranges
    }

    /// True when a site may get a fitted form, so that observing input ranges is worth a run.
    pub fn may_fit(&self) -> bool {
        self.policy(&self.ranges).may_fit()
    }

    fn policy<'a>(&'a self, ranges: &'a FitRanges) -> Policy<'a> {
        Policy {
            requests: &self.requests,
            target: self.profile.as_ref(),
            ranges,
        }
    }

    /// The target profile, when one was given.
    pub fn profile(&self) -> Option<&Profile> {
        self.profile.as_ref()
    }

    /// How reports name what the model was converted for: the target's label and the requests.
    pub fn describe(&self) -> String {
        let requests: Vec<&str> = self.requests.iter().map(|r| r.text.as_str()).collect();
        match (&self.profile, requests.is_empty()) {
            (Some(p), true) => format!("target {}", p.label()),
            (Some(p), false) => format!(
                "target {}, refined by --to {}",
                p.label(),
                requests.join(" ")
            ),
            (None, _) => format!("--to {}", requests.join(" ")),
        }
    }

    /// The drift budget that applies: each limit from `flags` where set, else from the target's
    /// profile, else [`DEFAULT_BUDGET`] (a profile without a budget takes the default too); and
    /// where it came from, in words.
    pub fn budget(&self, flags: Budgets) -> (Budgets, String) {
        let base = match &self.profile {
            Some(p) if !p.budget.is_empty() => (p.budget, format!("profile {}", p.name)),
            _ => (DEFAULT_BUDGET, "default".to_string()),
        };
        let source = if flags.is_empty() {
            base.1
        } else {
            format!("flags, then {}", base.1)
        };
        (flags.or(base.0), source)
    }

    /// Scans the model, keeps the sites asked for (refusing unknown ids) and plans them with
    /// the declared fitting ranges.
    pub fn plan(&self, index: &ModelIndex, model: &Path) -> Result<Plan> {
        let sites = self.sites(index, model)?;
        Ok(self.plan_sites(sites, index, &self.ranges))
    }

    /// Plans `sites` (from [`Conversion::sites`]) with these fitting ranges.
    pub fn plan_sites(&self, sites: Vec<Site>, index: &ModelIndex, ranges: &FitRanges) -> Plan {
        Plan::build(sites, &self.policy(ranges), index.main().opset(""))
    }

    /// Computes the plan's bounds over the real line for `sites` ahead ([`Plan::bounds_ahead`]).
    pub fn bounds_ahead(&self, sites: &[Site]) {
        Plan::bounds_ahead(sites, &self.policy(&self.ranges));
    }

    /// The model's sites, only those asked for (refusing unknown ids).
    pub fn sites(&self, index: &ModelIndex, model: &Path) -> Result<Vec<Site>> {
        let mut sites = scan::scan(index).sites;
        if !self.sites.is_empty() {
            for id in &self.sites {
                if !sites.iter().any(|s| &s.id == id) {
                    bail!(
                        "no site '{id}' in '{}' (see `actswap scan`)",
                        model.display()
                    );
                }
            }
            sites.retain(|s| self.sites.contains(&s.id));
        }
        Ok(sites)
    }
}
