//! A graph under construction: named tensors and nodes, seeded weights, the activation sites and
//! near misses it holds, and the weights to rescale so each site's input spans about -4..4
//! (see calibrate.rs).

use std::collections::HashSet;

use actswap::onnx::builder::{attr_t, node, tensor_f32};
use actswap::onnx::proto::{AttributeProto, GraphProto, NodeProto, TensorProto, ValueInfoProto};
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};

/// A site parameter: one value, or one per channel.
#[derive(Debug, Clone)]
pub enum Param {
    Scalar(f32),
    PerChannel(Vec<f32>),
}

/// An activation site as a scan must report it.
#[derive(Debug, Clone)]
pub struct Site {
    pub kind: &'static str,
    /// `fused` (one ONNX op) or `decomposed` (a chain of primitive ops).
    pub form: &'static str,
    pub params: Vec<(&'static str, Param)>,
    /// Attributes written on the fused op (defaults left out stay out).
    pub attributes: Vec<AttributeProto>,
    /// The computing nodes, in graph order, and their op types.
    pub nodes: Vec<String>,
    pub pattern: Vec<String>,
    /// Constant nodes feeding the site.
    pub constant_nodes: Vec<String>,
    /// Initializers read by this site only, and initializers it shares with other sites.
    pub constants: Vec<String>,
    pub shared_constants: Vec<String>,
    pub input: String,
    pub output: String,
    /// `main`, or `main/<node>.<attribute>` for a subgraph.
    pub graph: String,
}

/// A chain that looks like an activation but is not one of `not_kinds`.
#[derive(Debug, Clone)]
pub struct NearMiss {
    pub not_kinds: Vec<&'static str>,
    pub reason: &'static str,
    pub inputs: Vec<String>,
    pub output: String,
    pub nodes: Vec<String>,
    pub pattern: Vec<String>,
    pub graph: String,
}

/// Scale a layer's weight and bias so that `tensor` spans the calibration target.
#[derive(Debug, Clone)]
pub struct Calibration {
    pub tensor: String,
    pub params: Vec<String>,
}

/// A site as an emitter describes it to [`Net::site_since`].
pub struct SiteSpec {
    kind: &'static str,
    form: &'static str,
    params: Vec<(&'static str, Param)>,
    input: String,
    output: String,
    constants: Vec<String>,
    shared_constants: Vec<String>,
}

impl SiteSpec {
    pub fn new(kind: &'static str, form: &'static str, input: &str, output: &str) -> SiteSpec {
        SiteSpec {
            kind,
            form,
            params: Vec::new(),
            input: input.into(),
            output: output.into(),
            constants: Vec::new(),
            shared_constants: Vec::new(),
        }
    }

    pub fn params(mut self, params: Vec<(&'static str, Param)>) -> SiteSpec {
        self.params = params;
        self
    }

    /// Initializers read by this site only.
    pub fn constants(mut self, names: &[&str]) -> SiteSpec {
        self.constants = names.iter().map(|s| s.to_string()).collect();
        self
    }

    /// Initializers this site shares with others.
    pub fn shared_constants(mut self, names: &[&str]) -> SiteSpec {
        self.shared_constants = names.iter().map(|s| s.to_string()).collect();
        self
    }
}

/// The graph being built.
pub struct Net {
    pub rng: StdRng,
    nodes: Vec<NodeProto>,
    initializers: Vec<TensorProto>,
    node_names: HashSet<String>,
    tensor_names: HashSet<String>,
    graph: String,
    pending_layer: Option<Vec<String>>,
    pub sites: Vec<Site>,
    pub near_misses: Vec<NearMiss>,
    pub calibrations: Vec<Calibration>,
}

impl Net {
    pub fn new(seed: u64, inputs: &[&str]) -> Net {
        Net {
            rng: StdRng::seed_from_u64(seed),
            nodes: Vec::new(),
            initializers: Vec::new(),
            node_names: HashSet::new(),
            tensor_names: inputs.iter().map(|s| s.to_string()).collect(),
            graph: "main".into(),
            pending_layer: None,
            sites: Vec::new(),
            near_misses: Vec::new(),
            calibrations: Vec::new(),
        }
    }

    /// Adds a node named after its single output and returns that output.
    pub fn op(
        &mut self,
        op: &str,
        out: &str,
        inputs: &[&str],
        attrs: Vec<AttributeProto>,
    ) -> String {
        assert!(
            self.node_names.insert(out.into()),
            "node name {out} repeats"
        );
        assert!(self.tensor_names.insert(out.into()), "tensor {out} repeats");
        self.nodes.push(node(op, out, inputs, &[out], attrs));
        out.into()
    }

    /// A float32 initializer.
    pub fn init(&mut self, name: &str, dims: &[i64], values: &[f32]) -> String {
        assert!(
            self.tensor_names.insert(name.into()),
            "tensor {name} repeats"
        );
        self.initializers.push(tensor_f32(name, dims, values));
        name.into()
    }

    /// A scalar float32 initializer.
    pub fn scalar(&mut self, name: &str, v: f32) -> String {
        self.init(name, &[], &[v])
    }

    /// A Constant node holding a scalar float32.
    pub fn constant_node(&mut self, name: &str, v: f32) -> String {
        let value = attr_t("value", tensor_f32("", &[], &[v]));
        self.op("Constant", name, &[], vec![value])
    }

    /// `n` values drawn uniformly from `lo..hi`.
    pub fn uniform(&mut self, n: usize, lo: f32, hi: f32) -> Vec<f32> {
        (0..n).map(|_| self.rng.random_range(lo..hi)).collect()
    }

    /// A weight of unit gain (variance 1/fan_in) and a small bias; the pair is the layer the
    /// next [`Net::calibrate`] call rescales.
    pub fn layer_params(
        &mut self,
        name: &str,
        weight_dims: &[i64],
        fan_in: i64,
        bias_len: i64,
    ) -> (String, String) {
        assert!(
            self.pending_layer.is_none(),
            "layer before {name} never calibrated"
        );
        let n: i64 = weight_dims.iter().product();
        let bound = (3.0 / fan_in as f32).sqrt();
        let w = self.uniform(n as usize, -bound, bound);
        let b = self.uniform(bias_len as usize, -0.3, 0.3);
        let w = self.init(&format!("{name}.weight"), weight_dims, &w);
        let b = self.init(&format!("{name}.bias"), &[bias_len], &b);
        self.pending_layer = Some(vec![w.clone(), b.clone()]);
        (w, b)
    }

    /// Asks the calibration to scale the last layer so that `tensor` spans the target.
    pub fn calibrate(&mut self, tensor: &str) {
        let params = self.pending_layer.take().expect("no layer to calibrate");
        self.calibrations.push(Calibration {
            tensor: tensor.into(),
            params,
        });
    }

    /// The number of nodes emitted so far in the current graph.
    pub fn mark(&self) -> usize {
        self.nodes.len()
    }

    /// Records the nodes emitted since `mark` as one site.
    pub fn site_since(&mut self, mark: usize, spec: SiteSpec) {
        let (computing, constant_nodes) = self.split_since(mark);
        let attributes = if spec.form == "fused" {
            self.nodes[mark].attribute.clone()
        } else {
            Vec::new()
        };
        self.sites.push(Site {
            kind: spec.kind,
            form: spec.form,
            params: spec.params,
            attributes,
            pattern: self.pattern(&computing),
            nodes: computing,
            constant_nodes,
            constants: spec.constants,
            shared_constants: spec.shared_constants,
            input: spec.input,
            output: spec.output,
            graph: self.graph.clone(),
        });
    }

    /// Records the nodes emitted since `mark` as a near miss.
    pub fn near_miss_since(
        &mut self,
        mark: usize,
        not_kinds: &[&'static str],
        reason: &'static str,
        inputs: &[&str],
        output: &str,
    ) {
        let (computing, _) = self.split_since(mark);
        self.near_misses.push(NearMiss {
            not_kinds: not_kinds.to_vec(),
            reason,
            inputs: inputs.iter().map(|s| s.to_string()).collect(),
            output: output.into(),
            pattern: self.pattern(&computing),
            nodes: computing,
            graph: self.graph.clone(),
        });
    }

    fn split_since(&self, mark: usize) -> (Vec<String>, Vec<String>) {
        let (constant, computing): (Vec<&NodeProto>, Vec<&NodeProto>) = self.nodes[mark..]
            .iter()
            .partition(|n| n.op_type() == "Constant");
        let names = |v: Vec<&NodeProto>| v.iter().map(|n| n.name().to_string()).collect();
        (names(computing), names(constant))
    }

    fn pattern(&self, names: &[String]) -> Vec<String> {
        names
            .iter()
            .map(|name| {
                let n = self.nodes.iter().find(|n| n.name() == name).unwrap();
                n.op_type().to_string()
            })
            .collect()
    }

    /// Builds a subgraph for attribute `attribute` of node `owner`: `body` emits its nodes and
    /// returns the graph outputs. Names stay unique across the whole model.
    pub fn subgraph(
        &mut self,
        owner: &str,
        attribute: &str,
        body: impl FnOnce(&mut Net) -> Vec<ValueInfoProto>,
    ) -> GraphProto {
        let outer_nodes = std::mem::take(&mut self.nodes);
        let outer_graph = std::mem::replace(&mut self.graph, format!("main/{owner}.{attribute}"));
        let output = body(self);
        let nodes = std::mem::replace(&mut self.nodes, outer_nodes);
        self.graph = outer_graph;
        GraphProto {
            name: Some(format!("{owner}.{attribute}")),
            node: nodes,
            output,
            ..Default::default()
        }
    }

    /// The finished main graph, free of value_info.
    pub fn into_graph(
        self,
        name: &str,
        doc: &str,
        input: Vec<ValueInfoProto>,
        output: Vec<ValueInfoProto>,
    ) -> (GraphProto, Record) {
        assert!(self.pending_layer.is_none(), "a layer was never calibrated");
        let graph = GraphProto {
            name: Some(name.into()),
            doc_string: Some(doc.into()),
            node: self.nodes,
            initializer: self.initializers,
            input,
            output,
            ..Default::default()
        };
        let record = Record {
            sites: self.sites,
            near_misses: self.near_misses,
            calibrations: self.calibrations,
        };
        (graph, record)
    }
}

/// What a finished graph holds besides its protobuf.
#[derive(Debug, Clone)]
pub struct Record {
    pub sites: Vec<Site>,
    pub near_misses: Vec<NearMiss>,
    pub calibrations: Vec<Calibration>,
}
