//! What to convert to: `--to` requests or a target profile, and the sites asked for.

use std::path::Path;

use anyhow::{Result, bail};

use crate::onnx::ModelIndex;
use crate::plan::profile::Profile;
use crate::plan::request::Request;
use crate::plan::{Plan, Policy};
use crate::scan;

/// Parsed requests or profile, checked before any model is read.
#[derive(Debug, Clone)]
pub struct Conversion {
    requests: Vec<Request>,
    profile: Option<Profile>,
    sites: Vec<String>,
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
        })
    }

    /// Scans the model, keeps the sites asked for (refusing unknown ids) and plans them.
    pub fn plan(&self, index: &ModelIndex, model: &Path) -> Result<Plan> {
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
        let policy = match &self.profile {
            Some(p) => Policy::Target(p),
            None => Policy::Requests(&self.requests),
        };
        Ok(Plan::build(sites, &policy, index.main().opset("")))
    }
}
