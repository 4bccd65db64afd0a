//! What to convert to (`--to`, `--target`, `--site`), shared by `swap` and `audit`.

use std::path::{Path, PathBuf};

use anyhow::{Result, bail};

use crate::files::open_regular;
use crate::onnx::ModelIndex;
use crate::plan::profile::Profile;
use crate::plan::request::Request;
use crate::plan::{Plan, Policy};
use crate::scan;

#[derive(Debug, clap::Args)]
pub struct PlanArgs {
    /// A conversion: KIND=FORM, KIND=SUBSTITUTE or KIND=SUBSTITUTE:FORM; KIND may be '*'.
    #[arg(long = "to", value_name = "KIND=FORM", conflicts_with = "target")]
    to: Vec<String>,
    /// A target profile: a built-in name (see `actswap targets`) or a TOML file.
    #[arg(long, value_name = "PROFILE")]
    target: Option<String>,
    /// Only these sites (ids from `actswap scan`; repeatable).
    #[arg(long = "site", value_name = "ID")]
    sites: Vec<String>,
}

/// Parsed requests or profile, checked before any model is read.
pub struct Conversion {
    requests: Vec<Request>,
    profile: Option<Profile>,
    sites: Vec<String>,
}

impl PlanArgs {
    /// Parses the requests or loads the profile; one of them is required.
    pub fn conversion(&self) -> Result<Conversion> {
        let requests: Vec<Request> = self
            .to
            .iter()
            .map(|t| Request::parse(t))
            .collect::<Result<_>>()?;
        if let Some(file) = self.target.as_deref().map(Path::new).filter(|p| p.exists()) {
            // A FIFO or a device would block the profile's read.
            open_regular(file, "target profile")?;
        }
        let profile = self.target.as_deref().map(Profile::load).transpose()?;
        if requests.is_empty() && profile.is_none() {
            bail!("say what to convert to: --to KIND=FORM (repeatable) or --target PROFILE");
        }
        Ok(Conversion {
            requests,
            profile,
            sites: self.sites.clone(),
        })
    }
}

impl PlanArgs {
    /// The profile file `--target` reads, when it names one.
    pub fn files(&self) -> Vec<PathBuf> {
        self.target
            .iter()
            .map(PathBuf::from)
            .filter(|p| p.is_file())
            .collect()
    }
}

impl Conversion {
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
        Ok(Plan::build(index, sites, &policy))
    }
}
