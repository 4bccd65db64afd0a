//! What to convert to (`--to`, `--target`, `--site`), shared by `swap` and `audit`.

use std::path::{Path, PathBuf};

use anyhow::Result;

use crate::audit::Conversion;
use crate::files::open_regular;
use crate::plan::profile::Profile;
use crate::plan::ranges::FitRanges;
use crate::plan::request::Request;

#[derive(Debug, clap::Args)]
pub struct PlanArgs {
    /// A conversion: KIND=FORM, KIND=SUBSTITUTE or KIND=SUBSTITUTE:FORM; KIND may be '*'. With
    /// --target, it refines the target for the kinds it names (the result must still be a form
    /// the target runs).
    #[arg(long = "to", value_name = "KIND=FORM")]
    to: Vec<String>,
    /// A target profile: a built-in name (see `actswap targets`) or a TOML file.
    #[arg(long, value_name = "PROFILE")]
    target: Option<String>,
    /// Only these sites (ids from `actswap scan`; repeatable).
    #[arg(long = "site", value_name = "ID")]
    sites: Vec<String>,
    /// The range fitted forms are fitted over where no input range is observed: LO,HI for
    /// every kind, KIND=LO,HI for one (repeatable; default -8,8). audit and batch fit over each
    /// site's observed input range widened by 25% of its width on each side.
    #[arg(
        long = "fit-range",
        value_name = "[KIND=]LO,HI",
        allow_hyphen_values = true
    )]
    fit_range: Vec<String>,
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
        let ranges = FitRanges::declared(&self.fit_range)?;
        Ok(Conversion::new(requests, profile, self.sites.clone())?.with_fit_ranges(ranges))
    }

    /// The profile file `--target` reads, when it names one.
    pub fn files(&self) -> Vec<PathBuf> {
        self.target
            .iter()
            .map(PathBuf::from)
            .filter(|p| p.is_file())
            .collect()
    }
}
