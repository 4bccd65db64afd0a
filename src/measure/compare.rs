//! Comparing an original model with its rewrite on the same samples: drift per site and at every
//! graph output, budgets, and latency. The library entry of the `drift` and `audit` commands.
//!
//! The sites come as pairs (original, counterpart): from the plan and the applied rewrite in
//! `audit`, from [`super::pairs::by_output`] when two files are compared. Each model runs once
//! per sample with every pair's input and output requested as extra outputs, one model after
//! the other (only the captured values are kept), optimized when latency is measured and as its
//! typed graph otherwise ([`Compilation`]); a site inside an If branch is captured by running the
//! branch lifted into a model of its own, on the samples where the If takes it, and a site in a
//! Scan body (of the main graph or of a branch) by a measuring copy that carries its values out
//! of the Scan, every iteration stacked ([`super::subgraphs`]). Per pair:
//! - **local drift**: the rewritten model's site, isolated ([`super::isolate`]), against the
//!   original site, isolated, both fed the very tensor the original site received. Both sides go
//!   through the same isolation and the same tract optimizer, so the difference is the swap's
//!   own error; `isolation_max_abs` checks the isolated original against its value in the full
//!   model. A site in a Loop body of the main graph or in a local function is measured at every
//!   iteration or call of the copy tract runs ([`super::runnable`]); a site in a graph nested in
//!   a Scan or Loop body, or in a Loop body inside a branch, is reported as not measured, with
//!   the reason ([`super::subgraphs::reach`]); a site in a branch the samples never take, as not
//!   reached.
//! - **propagated drift**: the site's output tensor in the rewritten model against the original
//!   model (upstream changes included), on the samples where both models reach it.
//! - the observed input range and the catalogue's worst-case error of (kind_a, params_a) vs
//!   (kind_b, params_b) over [min, max] (per-channel parameters: the worst channel).

use std::collections::{BTreeMap, BTreeSet};

use anyhow::{Context, Result, ensure};

use super::budget::{self, Budgets, Offender, Scope};
use super::capture::{self, Values, widen};
use super::isolate::{self, Extract, InputDecl, Part};
use super::latency::{self, LatencyOptions};
use super::metrics::{DriftAccumulator, Tolerance, Top1Accumulator, top1_applies};
use super::pairs::SitePair;
use super::range::{InputRange, RangeCollector};
use super::result::{CAUTION, DriftReport, LocalBasis, OutputDrift, SiteDrift, UnmatchedSite};
use super::runnable::{self, Runnable};
use super::subgraphs::{self, Captures};
use crate::catalog::fit::Fitted;
use crate::catalog::substitute;
use crate::onnx::{Model, ModelIndex};
use crate::run::{self, Compilation, NamedTensor, Sample, TractModel};
use crate::scan::Site;

/// How to compare.
#[derive(Debug, Clone, PartialEq)]
pub struct CompareOptions {
    pub tolerance: Tolerance,
    pub budgets: Budgets,
    /// `None`: no latency measured.
    pub latency: Option<LatencyOptions>,
    /// Where the samples came from, as the report states it.
    pub input_source: String,
    /// Bytes a run's values may take, one of them or all together, before the model is refused
    /// ([`run::TractModel::with_memory_ceiling`]).
    pub memory_ceiling: u64,
}

impl Default for CompareOptions {
    /// Default tolerance, no budgets, default latency runs.
    fn default() -> Self {
        CompareOptions {
            tolerance: Tolerance::default(),
            budgets: Budgets::default(),
            latency: Some(LatencyOptions::default()),
            input_source: "given by the caller".into(),
            memory_ceiling: run::DEFAULT_MEMORY_CEILING,
        }
    }
}

/// Compares two models given as files: both are scanned and their sites paired by output
/// tensor ([`super::pairs::by_output`]), then [`compare`]d.
pub fn compare_models(
    original: &Model,
    rewritten: &Model,
    samples: &[Sample],
    opts: &CompareOptions,
) -> Result<DriftReport> {
    let a = ModelIndex::build(original).context("original model")?;
    let b = ModelIndex::build(rewritten).context("rewritten model")?;
    let (pairs, unmatched) = super::pairs::by_output(&a, &b);
    compare(&a, &b, &pairs, unmatched, samples, opts, None)
}

/// How both models are compiled: without latency only values are wanted, so they run as
/// typed, which costs time linear in the node count.
fn compilation(opts: &CompareOptions) -> Compilation {
    match opts.latency {
        Some(_) => Compilation::Optimized,
        None => Compilation::Typed,
    }
}

/// The tensors [`compare`] captures in the original model for `sites`: each site's input and
/// output, by graph.
fn site_values<'s>(sites: impl Iterator<Item = &'s Site>) -> BTreeMap<usize, BTreeSet<String>> {
    let mut asks: BTreeMap<usize, BTreeSet<String>> = BTreeMap::new();
    for site in sites {
        let values = asks.entry(site.graph_index).or_default();
        values.insert(site.input.clone());
        values.insert(site.output.clone());
    }
    asks
}

/// The original model's values at its sites, captured once before [`compare`] for a caller
/// that reads them first (audit's calibration), so that the model runs once.
pub struct OriginalValues {
    asked: BTreeMap<usize, BTreeSet<String>>,
    compilation: Compilation,
    captures: Captures,
}

impl OriginalValues {
    /// The main graph's values, one per sample (the inputs included).
    pub fn main(&self) -> &[Values] {
        self.captures.main()
    }

    /// Whether these values include `asks` and were computed as [`compare`] will compile.
    fn covers(&self, asks: &BTreeMap<usize, BTreeSet<String>>, compilation: Compilation) -> bool {
        self.compilation == compilation
            && asks
                .iter()
                .all(|(g, names)| self.asked.get(g).is_some_and(|have| names.is_subset(have)))
    }
}

/// Runs the original model on `samples` and captures every site's input and output as
/// [`compare`] would with `opts`, for the sites whose graph can be reached.
pub fn capture_original(
    index: &ModelIndex,
    sites: &[Site],
    samples: &[Sample],
    opts: &CompareOptions,
) -> Result<OriginalValues> {
    let compilation = compilation(opts);
    let side = Side::new(index, "original model", opts.memory_ceiling, compilation);
    let asked = site_values(
        sites
            .iter()
            .filter(|s| subgraphs::reach(index, s.graph_index).is_ok()),
    );
    Ok(OriginalValues {
        captures: side.capture(samples, asked.clone())?,
        asked,
        compilation,
    })
}

/// Compares `rewritten` with `original` on `samples`, site by site for `pairs`; `unmatched`
/// are the sites found in only one model. See the module doc.
///
/// `captured` holds the original model's values when they were captured before
/// ([`capture_original`]); the original model then runs only for what they lack.
pub fn compare(
    original: &ModelIndex,
    rewritten: &ModelIndex,
    pairs: &[SitePair],
    unmatched: Vec<UnmatchedSite>,
    samples: &[Sample],
    opts: &CompareOptions,
    captured: Option<OriginalValues>,
) -> Result<DriftReport> {
    ensure!(!samples.is_empty(), "no input samples to compare on");
    let compilation = compilation(opts);
    let a = Side::new(original, "original model", opts.memory_ceiling, compilation);
    let b = Side::new(
        rewritten,
        "rewritten model",
        opts.memory_ceiling,
        compilation,
    );
    let reach: Vec<Result<(), String>> = pairs
        .iter()
        .map(|p| {
            subgraphs::reach(original, p.a.graph_index)
                .and_then(|()| subgraphs::reach(rewritten, p.b.graph_index))
        })
        .collect();
    let reached: Vec<&SitePair> = pairs
        .iter()
        .zip(&reach)
        .filter(|(_, r)| r.is_ok())
        .map(|(p, _)| p)
        .collect();
    let asks_a = site_values(reached.iter().map(|p| &p.a));
    let mut asks_b: BTreeMap<usize, BTreeSet<String>> = BTreeMap::new();
    for p in &reached {
        asks_b
            .entry(p.b.graph_index)
            .or_default()
            .insert(p.b.output.clone());
    }
    let cap_a = match captured.filter(|c| c.covers(&asks_a, compilation)) {
        Some(c) => c.captures,
        None => a.capture(samples, asks_a)?,
    };
    // The worst-case bounds need only the catalogue and the original's values: they are
    // computed on a thread of their own while the rewritten model runs.
    let ahead: Vec<Option<BoundJob>> = pairs
        .iter()
        .zip(&reach)
        .map(|(p, reach)| BoundJob::ahead(p, reach, &cap_a))
        .collect();
    let (cap_b, worst) = std::thread::scope(|scope| {
        let worst = scope.spawn(|| {
            ahead
                .iter()
                .map(|job| job.as_ref().map(BoundJob::compute))
                .collect::<Vec<_>>()
        });
        let cap_b = b.capture(samples, asks_b);
        let worst = worst
            .join()
            .unwrap_or_else(|panic| std::panic::resume_unwind(panic));
        (cap_b, worst)
    });
    let cap_b = cap_b?;
    let pairs: Vec<Pair> = pairs
        .iter()
        .zip(reach)
        .map(|(p, reach)| Pair::new(p, reach, &cap_a, &cap_b))
        .collect();

    let mut sites: Vec<SiteDrift> = pairs.iter().map(Pair::record).collect();
    for (i, (p, rec)) in pairs.iter().zip(sites.iter_mut()).enumerate() {
        measure_propagated(p, rec, opts.tolerance);
        if let Some((job, note_at)) = measure_range(p, rec) {
            // The bound computed ahead is over the same range whenever the rewritten model
            // reached the site as the original did, which is when a range is measured at all.
            let bound = match (&ahead[i], &worst[i]) {
                (Some(early), Some(bound)) if early.asks_as(&job) => bound.clone(),
                _ => job.compute(),
            };
            record_bound(rec, note_at, bound);
        }
    }
    let isolated = measure_local(&a, &b, &pairs, &mut sites, opts.tolerance);
    let outputs = measure_outputs(&a, &b, cap_a.main(), cap_b.main(), opts.tolerance);
    let latency = match opts.latency {
        Some(lat) => {
            for ((p, iso), rec) in pairs.iter().zip(&isolated).zip(sites.iter_mut()) {
                if let Some(iso) = iso.as_ref().filter(|i| !i.identical) {
                    match site_latency(&a, &b, p, iso, lat) {
                        Ok(l) => rec.latency = Some(l),
                        Err(e) => rec
                            .notes
                            .push(format!("latency not measured: {}", flat(&e))),
                    }
                }
            }
            Some(latency::end_to_end(
                &a.runnable(samples)?.tract,
                &b.runnable(samples)?.tract,
                &samples[0],
                lat,
            )?)
        }
        None => None,
    };

    let mut offenders: Vec<Offender> = Vec::new();
    for (out, drift) in &outputs {
        match drift {
            Ok(_) => {
                let m = out.metrics.as_ref().expect("measured output");
                offenders.extend(opts.budgets.check_output(
                    &out.name,
                    m,
                    out.top1_agreement.as_ref(),
                ));
            }
            Err(reason) => offenders.push(budget::incomparable(&out.name, reason.clone())),
        }
    }
    for rec in &sites {
        if let Some(local) = &rec.local {
            offenders.extend(opts.budgets.check_site(&rec.id_a, &rec.output, local));
        }
    }
    let offending =
        |scope: Scope, name: &str| offenders.iter().any(|o| o.scope == scope && o.name == name);
    let mut outputs: Vec<OutputDrift> = outputs.into_iter().map(|(o, _)| o).collect();
    outputs.sort_by_key(|o| !offending(Scope::Output, &o.name));
    sites.sort_by_key(|s| !offending(Scope::Site, &s.output));

    Ok(DriftReport {
        model_a: file_label(original.model),
        model_b: file_label(rewritten.model),
        samples: samples.len(),
        input_source: opts.input_source.clone(),
        tolerance: opts.tolerance,
        within_budget: offenders.is_empty(),
        sites,
        outputs,
        unmatched,
        latency,
        budgets: opts.budgets,
        offenders,
        caution: CAUTION,
    })
}

/// One model with its index, and how it runs.
struct Side<'i, 'm> {
    model: &'m Model,
    index: &'i ModelIndex<'m>,
    /// The model as errors name it.
    what: &'static str,
    /// The memory ceiling of every run of this side, isolated sites included.
    ceiling: u64,
    /// How every run of this side, isolated sites included, is compiled.
    compilation: Compilation,
}

impl<'i, 'm> Side<'i, 'm> {
    fn new(
        index: &'i ModelIndex<'m>,
        what: &'static str,
        ceiling: u64,
        compilation: Compilation,
    ) -> Side<'i, 'm> {
        Side {
            model: index.model,
            index,
            what,
            ceiling,
            compilation,
        }
    }

    /// `model` (this side's or one built from it) loaded into tract to run as this side runs.
    fn prepare(&self, model: &Model, what: &str) -> Result<TractModel> {
        Ok(capture::load(model)
            .with_context(|| what.to_string())?
            .with_memory_ceiling(self.ceiling)
            .with_compilation(self.compilation))
    }

    /// The copy of this side's model tract runs ([`runnable::prepare`]), compiled as this side
    /// runs.
    fn runnable(&self, samples: &[Sample]) -> Result<Runnable> {
        let Runnable { tract, bodies } = runnable::prepare(self.index, samples, self.ceiling)
            .with_context(|| self.what.to_string())?;
        Ok(Runnable {
            tract: tract.with_compilation(self.compilation),
            bodies,
        })
    }

    /// Runs this side on `samples` with the tensors `asks` of each graph captured; the tract
    /// model is dropped before returning, so the two sides never hold their weights together.
    fn capture(
        &self,
        samples: &[Sample],
        asks: BTreeMap<usize, BTreeSet<String>>,
    ) -> Result<Captures> {
        let runnable = self.runnable(samples)?;
        subgraphs::capture(
            self.index,
            &runnable,
            samples,
            asks,
            self.what,
            self.ceiling,
        )
    }

    /// The graph output names, in graph order.
    fn outputs(&self) -> Vec<String> {
        self.index
            .main()
            .outputs
            .iter()
            .map(|&o| o.into())
            .collect()
    }
}

/// A site of the original model and its counterpart in the rewritten one, with the values
/// captured in their graphs.
struct Pair<'s, 'v> {
    a: &'s Site,
    b: &'s Site,
    /// The fit `b` computes, when it is a fitted form.
    fit: Option<&'s Fitted>,
    /// Per sample, the values of each site's graph where it ran; the reason when not captured.
    seen: Result<Seen<'v>, String>,
    /// How the figures combine the iterations or calls of a Loop or function body.
    combined: Option<&'v str>,
}

/// The values of a pair's graphs per sample (`None`: the sample did not reach the graph).
struct Seen<'v> {
    a: Vec<Option<&'v Values>>,
    b: Vec<Option<&'v Values>>,
}

impl<'s, 'v> Pair<'s, 'v> {
    fn new(
        p: &'s SitePair,
        reach: Result<(), String>,
        cap_a: &'v Captures,
        cap_b: &'v Captures,
    ) -> Pair<'s, 'v> {
        let seen = reach.and_then(|()| {
            let seen = Seen {
                a: cap_a.at(p.a.graph_index)?,
                b: cap_b.at(p.b.graph_index)?,
            };
            if seen.a.len() != seen.b.len() {
                return Err(format!(
                    "{} runs {} time(s) in the original model and {} in the rewritten one",
                    p.a.graph,
                    seen.a.len(),
                    seen.b.len()
                ));
            }
            Ok(seen)
        });
        Pair {
            a: &p.a,
            b: &p.b,
            fit: p.fit.as_ref(),
            seen,
            combined: cap_a.note(p.a.graph_index),
        }
    }

    /// The original model's values on the samples that reached the site.
    fn reached_a(&self) -> Vec<&'v Values> {
        match &self.seen {
            Ok(seen) => seen.a.iter().flatten().copied().collect(),
            Err(_) => Vec::new(),
        }
    }

    fn record(&self) -> SiteDrift {
        let mut notes = Vec::new();
        match &self.seen {
            Err(why) => notes.push(format!("drift not measured: {why}")),
            Ok(_) if self.reached_a().is_empty() => notes.push(format!(
                "drift not measured: not reached on these samples ({} did not run): give inputs that reach it",
                self.a.graph
            )),
            Ok(_) => notes.extend(self.combined.map(str::to_string)),
        }
        SiteDrift {
            id_a: self.a.id.clone(),
            id_b: self.b.id.clone(),
            output: self.a.output.clone(),
            graph: self.a.graph.clone(),
            kind_a: self.a.kind,
            params_a: self.a.params.clone(),
            ops_a: self.a.ops.clone(),
            kind_b: self.b.kind,
            params_b: self.b.params.clone(),
            ops_b: self.b.ops.clone(),
            local: None,
            local_basis: None,
            propagated: None,
            isolation_max_abs: None,
            input_range: None,
            bound_over_range: None,
            bound_at: None,
            latency: None,
            notes,
        }
    }
}

/// The site's output in the rewritten model against the original, on the samples where both
/// models reach it.
fn measure_propagated(p: &Pair, rec: &mut SiteDrift, tol: Tolerance) {
    let Ok(seen) = &p.seen else { return };
    let mut acc = DriftAccumulator::new(tol);
    let (mut both, mut one) = (0, 0);
    let measured: Result<()> = seen.a.iter().zip(&seen.b).try_for_each(|(va, vb)| {
        match (va, vb) {
            (Some(va), Some(vb)) => {
                both += 1;
                acc.add(&widen(&va[&p.a.output])?, &widen(&vb[&p.b.output])?)?;
            }
            (None, None) => {}
            _ => one += 1,
        }
        Ok(())
    });
    if one > 0 {
        rec.notes.push(format!(
            "{} ran in only one of the two models on {one} sample(s): propagated drift leaves those out",
            p.a.graph
        ));
    }
    match measured {
        Ok(()) if both > 0 => rec.propagated = Some(acc.finish()),
        Ok(()) => {}
        Err(e) => rec
            .notes
            .push(format!("propagated drift not measured: {}", flat(&e))),
    }
}

/// Measures the range of the site's input on the samples; the worst-case bound over it is
/// left to the returned job, and a failure to bound goes in the notes at the returned position
/// (after the notes before the range).
fn measure_range<'s>(p: &Pair<'s, '_>, rec: &mut SiteDrift) -> Option<(BoundJob<'s>, usize)> {
    let values_a = p.reached_a();
    if values_a.is_empty() {
        return None;
    }
    match input_range(&values_a, &p.a.input) {
        Err(e) => {
            rec.notes.push(format!("input range not measured: {e}"));
            None
        }
        Ok(None) => {
            rec.notes
                .push("input range: no finite input value was seen".into());
            None
        }
        Ok(Some(r)) => {
            rec.input_range = Some(r);
            let job = BoundJob {
                a: p.a,
                b: p.b,
                fit: p.fit,
                lo: r.min,
                hi: r.max,
            };
            Some((job, rec.notes.len()))
        }
    }
}

/// The range of tensor `input` over `values`; `None` when no finite value was seen.
fn input_range(values: &[&Values], input: &str) -> Result<Option<InputRange>, String> {
    let mut range = RangeCollector::default();
    for v in values {
        range.add(&widen(&v[input]).map_err(|e| flat(&e))?);
    }
    Ok(range.finish())
}

/// Records a site's worst-case bound, or why there is none at `note_at` of its notes.
fn record_bound(rec: &mut SiteDrift, note_at: usize, bound: Result<(f64, f64), String>) {
    match bound {
        Ok((value, at)) => {
            rec.bound_over_range = Some(value);
            rec.bound_at = Some(at);
        }
        Err(why) => rec
            .notes
            .insert(note_at, format!("no worst-case bound: {why}")),
    }
}

/// The catalogue's worst-case |a - b| of one site over its measured input range.
struct BoundJob<'s> {
    a: &'s Site,
    b: &'s Site,
    /// The fit `b` computes, when it is a fitted form.
    fit: Option<&'s Fitted>,
    lo: f64,
    hi: f64,
}

impl<'s> BoundJob<'s> {
    /// The job [`measure_range`] will give for `p` once the rewritten model has run, from the
    /// original's values alone; `None` where it will give none (or may not).
    fn ahead(p: &'s SitePair, reach: &Result<(), String>, cap_a: &Captures) -> Option<Self> {
        reach.as_ref().ok()?;
        let values: Vec<&Values> = cap_a
            .at(p.a.graph_index)
            .ok()?
            .into_iter()
            .flatten()
            .collect();
        let r = input_range(&values, &p.a.input).ok()??;
        Some(BoundJob {
            a: &p.a,
            b: &p.b,
            fit: p.fit.as_ref(),
            lo: r.min,
            hi: r.max,
        })
    }

    /// Whether `other` asks the same: the same sites, fit and range, bit for bit.
    fn asks_as(&self, other: &BoundJob) -> bool {
        std::ptr::eq(self.a, other.a)
            && std::ptr::eq(self.b, other.b)
            && self.fit.map(std::ptr::from_ref) == other.fit.map(std::ptr::from_ref)
            && self.lo.to_bits() == other.lo.to_bits()
            && self.hi.to_bits() == other.hi.to_bits()
    }

    /// The worst case over [lo, hi], worst channel first (the fit's error, for a fitted form);
    /// and where.
    fn compute(&self) -> Result<(f64, f64), String> {
        if let Some(fit) = self.fit {
            let e = fit.error_over(self.lo, self.hi);
            return Ok((e.value, e.at));
        }
        let (a, b) = (self.a, self.b);
        let (pa, pb) = match (&a.params, &b.params) {
            (Some(pa), Some(pb)) => (pa, pb),
            _ => return Err("a parameter is only known at run time".into()),
        };
        let (e, _) =
            substitute::max_abs_error_per_channel((a.kind, pa), (b.kind, pb), self.lo, self.hi)?;
        Ok((e.value, e.at))
    }
}

/// An isolated site pair: both extracts and the declared input.
struct Isolated {
    ext_a: Extract,
    ext_b: Extract,
    decl: InputDecl,
    prefix: String,
    /// Same nodes, attributes and constants under the same opsets: the same computation.
    identical: bool,
}

/// Sites isolated together in one model. tract's typing grows with the square of a graph's node
/// count (it compares every node it adds with the graph's names and constants), so many small
/// models cost time linear in the site count where one large model does not.
const SITES_PER_ISOLATED_MODEL: usize = 64;

/// Local drift of every site whose input was captured, with the isolated sites of each graph
/// in models of up to [`SITES_PER_ISOLATED_MODEL`] sites (one compile and one run per such
/// model and sample). A site the rewrite left
/// identical (same nodes, attributes and constants, same opsets) computes the original's values
/// from the original's input, so it is not run: its local drift is the captured original output
/// against itself, and its basis says so. Returns each pair's isolation.
fn measure_local(
    a: &Side,
    b: &Side,
    pairs: &[Pair],
    sites: &mut [SiteDrift],
    tol: Tolerance,
) -> Vec<Option<Isolated>> {
    let mut isolated: Vec<Option<Isolated>> = Vec::with_capacity(pairs.len());
    for (p, rec) in pairs.iter().zip(sites.iter_mut()) {
        let values_a = p.reached_a();
        let iso = if values_a.is_empty() {
            None
        } else if p.a.input != p.b.input {
            rec.notes.push(format!(
                "local drift not measured: the sites read different tensors ('{}' in the original, '{}' in the rewritten model)",
                p.a.input, p.b.input
            ));
            None
        } else {
            let built = (|| -> Result<Isolated> {
                let decl = InputDecl::of(values_a.iter().map(|v| &v[&p.a.input].tensor))?;
                let ext_a = isolate::extract(a.index, p.a).context("original model")?;
                let ext_b = isolate::extract(b.index, p.b).context("rewritten model")?;
                let identical = ext_a.nodes == ext_b.nodes
                    && ext_a.initializers == ext_b.initializers
                    && a.model.proto().opset_import == b.model.proto().opset_import;
                Ok(Isolated {
                    ext_a,
                    ext_b,
                    decl,
                    prefix: format!("{}|", p.a.id),
                    identical,
                })
            })();
            built
                .map_err(|e| {
                    rec.notes
                        .push(format!("local drift not measured: {}", flat(&e)))
                })
                .ok()
        };
        isolated.push(iso);
    }
    for ((p, iso), rec) in pairs.iter().zip(&isolated).zip(sites.iter_mut()) {
        if iso.as_ref().is_some_and(|i| i.identical) {
            let mut same = DriftAccumulator::new(tol);
            let measured: Result<()> = p.reached_a().iter().try_for_each(|v| {
                let x = widen(&v[&p.a.output])?;
                same.add(&x, &x)
            });
            match measured {
                Ok(()) => {
                    rec.local = Some(same.finish());
                    rec.local_basis = Some(LocalBasis::Identical);
                }
                Err(e) => rec
                    .notes
                    .push(format!("local drift not measured: {}", flat(&e))),
            }
        }
    }
    // Isolated models per graph: the sites of a graph are reached on the same samples.
    let mut groups: BTreeMap<usize, Vec<usize>> = BTreeMap::new();
    for (i, (p, iso)) in pairs.iter().zip(&isolated).enumerate() {
        if iso.as_ref().is_some_and(|i| !i.identical) {
            groups.entry(p.a.graph_index).or_default().push(i);
        }
    }
    for members in groups
        .values()
        .flat_map(|m| m.chunks(SITES_PER_ISOLATED_MODEL))
    {
        let (head, iso) = (&pairs[members[0]], |i: usize| {
            isolated[i].as_ref().expect("grouped sites are isolated")
        });
        let parts = |b_side: bool| -> Vec<Part> {
            members
                .iter()
                .map(|&i| Part {
                    extract: if b_side { &iso(i).ext_b } else { &iso(i).ext_a },
                    decl: &iso(i).decl,
                    prefix: &iso(i).prefix,
                })
                .collect()
        };
        let (parts_a, parts_b) = (parts(false), parts(true));
        let reached = head.reached_a();
        let samples: Vec<Sample> = reached
            .iter()
            .map(|v| {
                parts_a
                    .iter()
                    .map(|part| {
                        NamedTensor::new(part.input_name(), v[&part.extract.input].tensor.clone())
                    })
                    .collect()
            })
            .collect();
        let run_isolated = |side: &Side, parts: &[Part], what: &str| -> Result<Vec<Values>> {
            let tract = side.prepare(&isolate::build(side.model, parts), what)?;
            capture::run_samples(&tract, &samples, &[], what)
        };
        let runs = run_isolated(a, &parts_a, "isolated original sites")
            .and_then(|ra| Ok((ra, run_isolated(b, &parts_b, "isolated new sites")?)));
        let (out_a, out_b) = match runs {
            Ok(r) => r,
            Err(e) => {
                for &i in members {
                    sites[i]
                        .notes
                        .push(format!("local drift not measured: {}", flat(&e)));
                }
                continue;
            }
        };
        for ((&i, pa), pb) in members.iter().zip(&parts_a).zip(&parts_b) {
            let (p, rec) = (&pairs[i], &mut sites[i]);
            let mut local = DriftAccumulator::new(tol);
            let mut check = DriftAccumulator::new(tol);
            let measured: Result<()> = reached.iter().enumerate().try_for_each(|(s, full)| {
                let ia = widen(&out_a[s][&pa.output_name()])?;
                local.add(&ia, &widen(&out_b[s][&pb.output_name()])?)?;
                check.add(&widen(&full[&p.a.output])?, &ia)
            });
            match measured {
                Ok(()) => {
                    rec.local = Some(local.finish());
                    rec.local_basis = Some(LocalBasis::Isolated);
                    let check = check.finish();
                    if check.beyond_tol > 0 {
                        rec.notes.push(format!(
                            "the isolated original site differs from its value in the full model by up to {:.3e}: tract optimized the two differently",
                            check.max_abs
                        ));
                    }
                    rec.isolation_max_abs = Some(check.max_abs);
                }
                Err(e) => rec
                    .notes
                    .push(format!("local drift not measured: {}", flat(&e))),
            }
        }
    }
    isolated
}

/// Per-site latency: each form isolated on its own, fed the first sample's captured input.
fn site_latency(
    a: &Side,
    b: &Side,
    p: &Pair,
    iso: &Isolated,
    opts: LatencyOptions,
) -> Result<latency::SiteLatency> {
    let values = *p.reached_a().first().context("the site was not reached")?;
    let input = &values[&p.a.input].tensor;
    let decl = InputDecl::of([input])?;
    let single = |side: &Side, extract: &Extract| {
        isolate::build(
            side.model,
            &[Part {
                extract,
                decl: &decl,
                prefix: "",
            }],
        )
    };
    let (ma, mb) = (single(a, &iso.ext_a), single(b, &iso.ext_b));
    let sa: Sample = vec![NamedTensor::new(&iso.ext_a.input, input.clone())];
    let sb: Sample = vec![NamedTensor::new(&iso.ext_b.input, input.clone())];
    latency::site((&ma, &sa), (&mb, &sb), opts, a.ceiling)
}

/// Drift and top-1 agreement at every graph output of the original model; the error says why
/// an output could not be compared.
fn measure_outputs(
    a: &Side,
    b: &Side,
    values_a: &[Values],
    values_b: &[Values],
    tol: Tolerance,
) -> Vec<(OutputDrift, Result<(), String>)> {
    let names_b = b.outputs();
    a.outputs()
        .into_iter()
        .map(|name| {
            let mut out = OutputDrift {
                name: name.clone(),
                metrics: None,
                top1_agreement: None,
                notes: Vec::new(),
            };
            if !names_b.contains(&name) {
                let why = "the rewritten model has no such output".to_string();
                out.notes.push(why.clone());
                return (out, Err(why));
            }
            let mut acc = DriftAccumulator::new(tol);
            let mut top1 = Top1Accumulator::default();
            let mut ranks = true;
            let measured: Result<()> = values_a.iter().zip(values_b).try_for_each(|(va, vb)| {
                let (x, y) = (widen(&va[&name])?, widen(&vb[&name])?);
                acc.add(&x, &y)?;
                ranks &= top1_applies(x.shape());
                if ranks {
                    top1.add(&x, &y)?;
                }
                Ok(())
            });
            match measured {
                Ok(()) => {
                    out.metrics = Some(acc.finish());
                    out.top1_agreement = ranks.then(|| top1.finish());
                    (out, Ok(()))
                }
                Err(e) => {
                    let why = format!("not compared: {}", flat(&e));
                    out.notes.push(why.clone());
                    (out, Err(why))
                }
            }
        })
        .collect()
}

/// The model's file, or a placeholder for a model built in memory.
fn file_label(model: &Model) -> String {
    if model.path().as_os_str().is_empty() {
        "(in memory)".into()
    } else {
        model.path().display().to_string()
    }
}

/// An error and its causes on one line.
fn flat(e: &anyhow::Error) -> String {
    format!("{e:#}")
}
