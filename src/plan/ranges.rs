//! The range a site's fitted form is fitted over: the site's observed input range widened by
//! [`fit::OBSERVED_MARGIN`] (audit, batch), else a declared `--fit-range` (`LO,HI` for every
//! kind, `KIND=LO,HI` for one), else [`fit::DEFAULT_RANGE`].

use std::collections::BTreeMap;

use anyhow::{Result, bail};
use schemars::JsonSchema;
use serde::Serialize;

use crate::catalog::fit::{self, FitRange};
use crate::catalog::{self, Kind};
use crate::scan::Site;

/// Where a fitting range came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum RangeSource {
    /// The site's input range on the given inputs, widened by the margin.
    Observed,
    /// `--fit-range`.
    Declared,
    /// The default range.
    Default,
}

/// Fitting ranges: observed per site, declared per kind or for all.
#[derive(Debug, Clone, Default)]
pub struct FitRanges {
    /// Observed (min, max) of the input by site id.
    observed: BTreeMap<String, (f64, f64)>,
    /// Declared ranges; `None` for every kind.
    declared: Vec<(Option<&'static Kind>, FitRange)>,
}

/// No observed or declared range: every site takes the default.
pub static NO_RANGES: FitRanges = FitRanges {
    observed: BTreeMap::new(),
    declared: Vec::new(),
};

impl FitRanges {
    /// Parses `--fit-range` values: `LO,HI` or `KIND=LO,HI` (`*=LO,HI` for every kind).
    pub fn declared(texts: &[String]) -> Result<FitRanges> {
        let mut declared = Vec::new();
        for text in texts {
            let (kind, pair) = match text.split_once('=') {
                Some((k, pair)) if k.trim() == "*" => (None, pair),
                Some((k, pair)) => match catalog::get(k.trim()) {
                    Some(kind) => (Some(kind), pair),
                    None => bail!("--fit-range '{text}': unknown kind '{}'", k.trim()),
                },
                None => (None, text.as_str()),
            };
            let numbers: Vec<f64> = pair
                .split(',')
                .map(|n| n.trim().parse::<f64>())
                .collect::<Result<_, _>>()
                .unwrap_or_default();
            let range = match numbers[..] {
                [lo, hi] => FitRange::new(lo, hi).ok(),
                _ => None,
            };
            let Some(range) = range else {
                bail!("--fit-range '{text}': expected LO,HI or KIND=LO,HI with LO < HI, e.g. -6,6");
            };
            declared.push((kind, range));
        }
        Ok(FitRanges {
            observed: BTreeMap::new(),
            declared,
        })
    }

    /// Adds the observed input range of the site `id`.
    pub fn observe(&mut self, id: &str, min: f64, max: f64) {
        self.observed.insert(id.to_string(), (min, max));
    }

    /// True when no range was observed or declared.
    pub fn is_empty(&self) -> bool {
        self.observed.is_empty() && self.declared.is_empty()
    }

    /// The fitting range of `site` and where it came from: observed, else declared for its
    /// kind, else declared for every kind, else the default.
    pub fn for_site(&self, site: &Site) -> (FitRange, RangeSource) {
        if let Some(&(min, max)) = self.observed.get(&site.id)
            && let Ok(range) = FitRange::observed(min, max)
        {
            return (range, RangeSource::Observed);
        }
        let declared = |kind: Option<&str>| {
            self.declared
                .iter()
                .find(|(k, _)| k.map(|k| k.id) == kind)
                .map(|(_, r)| *r)
        };
        match declared(Some(site.kind.id)).or_else(|| declared(None)) {
            Some(range) => (range, RangeSource::Declared),
            None => (fit::DEFAULT_RANGE, RangeSource::Default),
        }
    }
}
