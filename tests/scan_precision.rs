//! What the scanner must not take for an activation, and what a rewrite must leave alone:
//! integer computations are never sites, a bias in front of an activation (of any size, 0
//! included) stays outside its site and byte for byte in the rewritten model, and swish of any
//! slope becomes hard-swish of the same slope with the catalogue's bound.
//!
//! Sources: the ONNX operator specification (Abs, Cast, Relu, Erf, Sigmoid, HardSigmoid: the
//! models below mean what the standard says); hard-swish, Howard et al. 2019 (arXiv:1905.02244):
//! x * ReLU6(x + 3) / 6, whose largest distance to SiLU is 3 / (1 + e^3) = 0.14227761953270035 at
//! x = +-3 (computed from the two formulas); swish(x; b) = x * sigmoid(b x), Ramachandran, Zoph
//! and Le 2017, so swish(x; b) = silu(b x) / b and hard-swish with slope b is hardswish(b x) / b:
//! their distance is the SiLU one divided by |b| (algebra on the published formulas).

use actswap::onnx::builder::{Dim, attr_f, attr_i, model, node, opset, tensor_f32, value};
use actswap::onnx::proto::{
    GraphProto, ModelProto, NodeProto, TensorProto, tensor_proto::DataType,
};
use actswap::onnx::{Model, ModelIndex};
use actswap::plan::request::Request;
use actswap::plan::{Action, Plan, Policy};
use actswap::{rewrite, scan};
use prost::Message;

fn load(proto: ModelProto) -> Model {
    Model::from_proto(proto, std::env::temp_dir())
}

fn graph(
    nodes: Vec<NodeProto>,
    inits: Vec<TensorProto>,
    x: (DataType, i64),
    y: DataType,
) -> GraphProto {
    GraphProto {
        name: Some("g".into()),
        node: nodes,
        initializer: inits,
        input: vec![value("x", x.0, &[Dim::Size(1), Dim::Size(x.1)])],
        output: vec![value("y", y, &[Dim::Size(1), Dim::Size(x.1)])],
        ..Default::default()
    }
}

fn plan(m: &Model, to: &[&str]) -> Plan {
    let index = ModelIndex::build(m).unwrap();
    let sites = scan::scan(&index).sites;
    let requests: Vec<Request> = to.iter().map(|t| Request::parse(t).unwrap()).collect();
    Plan::build(sites, &Policy::requests(&requests), index.main().opset(""))
}

/// |x| on int64 indices then cast to float (a relative-position bucket), and Relu on int32:
/// integer computations, never sites, though |x| is leaky_relu with slope -1 on the reals.
#[test]
fn integer_chains_are_never_sites() {
    let abs_cast = graph(
        vec![
            node("Abs", "abs", &["x"], &["a"], vec![]),
            node(
                "Cast",
                "cast",
                &["a"],
                &["y"],
                vec![attr_i("to", DataType::Float as i64)],
            ),
        ],
        vec![],
        (DataType::Int64, 8),
        DataType::Float,
    );
    let relu = graph(
        vec![node("Relu", "relu", &["x"], &["y"], vec![])],
        vec![],
        (DataType::Int32, 8),
        DataType::Int32,
    );
    for (what, g) in [("int64 Abs -> Cast", abs_cast), ("int32 Relu", relu)] {
        let m = load(model(g, vec![opset("", 17)], "test"));
        let index = ModelIndex::build(&m).unwrap();
        let report = scan::scan(&index);
        assert!(report.sites.is_empty(), "{what}: {:?}", report.sites);
    }
}

/// x -> MatMul -> Add(bias) -> activation -> y, the activation spelled as exporters spell it.
fn biased(activation: &str, bias: f32) -> Model {
    let w: Vec<f32> = (0..16).map(|i| (i as f32 - 7.5) / 8.0).collect();
    let mut inits = vec![
        tensor_f32("w", &[4, 4], &w),
        tensor_f32("b", &[4], &[bias; 4]),
    ];
    let mut nodes = vec![
        node("MatMul", "mm", &["x", "w"], &["h"], vec![]),
        node("Add", "bias", &["h", "b"], &["z"], vec![]),
    ];
    match activation {
        // GELU, erf form: z * 0.5 * (1 + erf(z / sqrt 2)).
        "gelu" => {
            inits.extend([
                tensor_f32("sqrt2", &[], &[std::f32::consts::SQRT_2]),
                tensor_f32("one", &[], &[1.0]),
                tensor_f32("half", &[], &[0.5]),
            ]);
            nodes.extend([
                node("Div", "div", &["z", "sqrt2"], &["d"], vec![]),
                node("Erf", "erf", &["d"], &["e"], vec![]),
                node("Add", "add1", &["e", "one"], &["p"], vec![]),
                node("Mul", "mulz", &["z", "p"], &["q"], vec![]),
                node("Mul", "mulhalf", &["q", "half"], &["y"], vec![]),
            ]);
        }
        // swish with slope 1.5: z * sigmoid(1.5 z).
        "swish" => {
            inits.push(tensor_f32("beta", &[], &[1.5]));
            nodes.extend([
                node("Mul", "scale", &["z", "beta"], &["s"], vec![]),
                node("Sigmoid", "sig", &["s"], &["g"], vec![]),
                node("Mul", "gate", &["z", "g"], &["y"], vec![]),
            ]);
        }
        // hard-swish: z * HardSigmoid(z; 1/6, 1/2).
        "hard_swish" => nodes.extend([
            node(
                "HardSigmoid",
                "hsig",
                &["z"],
                &["g"],
                vec![attr_f("alpha", 1.0 / 6.0), attr_f("beta", 0.5)],
            ),
            node("Mul", "gate", &["z", "g"], &["y"], vec![]),
        ]),
        _ => unreachable!(),
    }
    load(model(
        graph(nodes, inits, (DataType::Float, 4), DataType::Float),
        vec![opset("", 17)],
        "test",
    ))
}

/// A bias of 0, 1e-6 or 0.37 before GELU, swish and hard-swish stays outside the site, and the
/// rewrite keeps its Add node and its initializer byte for byte.
#[test]
fn a_bias_before_an_activation_stays_outside_and_untouched() {
    let conversions = [
        ("gelu", "gelu=gelu_tanh"),
        ("swish", "swish=hard_swish:primitive"),
        ("hard_swish", "hard_swish=primitive"),
    ];
    for (activation, to) in conversions {
        for bias in [0.0, 1e-6, 0.37] {
            let what = format!("{activation}, bias {bias}");
            let m = biased(activation, bias);
            let p = plan(&m, &[to]);
            assert_eq!(p.sites.len(), 1, "{what}");
            let planned = &p.sites[0];
            assert_eq!(planned.site.kind.id, activation, "{what}");
            assert_eq!(
                planned.site.input, "z",
                "{what}: the site reads the bias output"
            );
            assert!(
                matches!(planned.action, Action::Rewrite(_)),
                "{what}: {:?}",
                planned.action
            );

            let index = ModelIndex::build(&m).unwrap();
            let (rewritten, _) = rewrite::apply(&m, &index, &p).unwrap();
            let g = &m.proto().graph.as_ref().unwrap();
            let ng = rewritten.proto().graph.as_ref().unwrap();
            let add = |g: &GraphProto| {
                g.node
                    .iter()
                    .find(|n| n.name() == "bias")
                    .map(|n| n.encode_to_vec())
            };
            let init = |g: &GraphProto| {
                g.initializer
                    .iter()
                    .find(|t| t.name() == "b")
                    .map(|t| t.encode_to_vec())
            };
            assert_eq!(add(ng), add(g), "{what}: the bias Add node");
            assert_eq!(init(ng), init(g), "{what}: the bias initializer");
        }
    }
}

/// `--to swish=hard_swish` serves swish of any slope, scalar or per channel, with the bound
/// 3 / (1 + e^3) / |beta| (module doc), and so does every slope of a per-channel site.
#[test]
fn swish_of_any_slope_becomes_hard_swish_with_its_bound() {
    const SILU_TO_HARD_SWISH: f64 = 0.142_277_619_532_700_35;
    // Scalar slope 1.5.
    let m = biased("swish", 0.1);
    let p = plan(&m, &["swish=hard_swish:primitive"]);
    let Action::Rewrite(r) = &p.sites[0].action else {
        panic!("{:?}", p.sites[0].action)
    };
    assert_eq!(r.kind.id, "hard_swish");
    let want = SILU_TO_HARD_SWISH / 1.5;
    assert!(
        (r.bound.value - want).abs() <= 1e-9 * want,
        "{} vs {want}",
        r.bound.value
    );

    // Per-channel slopes [1, 4] on a [1, 4] tensor: the worst channel is the smallest slope.
    let slopes = [0.5f32, 1.0, 2.0, 4.0];
    let nodes = vec![
        node("Mul", "scale", &["x", "beta"], &["s"], vec![]),
        node("Sigmoid", "sig", &["s"], &["g"], vec![]),
        node("Mul", "gate", &["x", "g"], &["y"], vec![]),
    ];
    let g = graph(
        nodes,
        vec![tensor_f32("beta", &[1, 4], &slopes)],
        (DataType::Float, 4),
        DataType::Float,
    );
    let m = load(model(g, vec![opset("", 17)], "test"));
    let p = plan(&m, &["swish=hard_swish:primitive"]);
    assert_eq!(p.sites.len(), 1);
    let Action::Rewrite(r) = &p.sites[0].action else {
        panic!("{:?}", p.sites[0].action)
    };
    assert_eq!(r.kind.id, "hard_swish");
    assert_eq!(r.params.channels(), 4, "the slopes stay per channel");
    let want = SILU_TO_HARD_SWISH / 0.5;
    assert!(
        (r.bound.value - want).abs() <= 1e-9 * want,
        "{} vs {want}",
        r.bound.value
    );
}

/// On every torch export of the fixtures (tests/fixtures/torch and torch-blocks, both
/// exporters), converting every site to its primitive form and to its fused op leaves every
/// main-graph node outside the sites as it was (a reader that takes only a type or shape may be
/// pointed at another tensor of the same type and shape; nothing else about it changes) and every
/// initializer a node outside the sites reads, byte for byte: a rewrite never drops a
/// computation its kind does not contain (common practice: a conversion is local to its sites).
#[test]
fn rewrites_of_real_exports_touch_only_their_sites() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures");
    let mut checked = 0;
    for set in ["torch", "torch-blocks"] {
        for entry in std::fs::read_dir(root.join(set)).unwrap() {
            let path = entry.unwrap().path().join("model.onnx");
            if !path.exists() {
                continue;
            }
            let m = Model::load(&path).unwrap();
            for to in ["*=primitive", "*=fused"] {
                let what = format!("{} {to}", path.display());
                let p = plan(&m, &[to]);
                let index = ModelIndex::build(&m).unwrap();
                let Ok((rewritten, _)) = rewrite::apply(&m, &index, &p) else {
                    panic!("{what}: the rewrite fails");
                };
                let rewritten_sites: Vec<&scan::Site> = p
                    .sites
                    .iter()
                    .filter(|s| matches!(s.action, Action::Rewrite(_)) && s.site.graph_index == 0)
                    .map(|s| &s.site)
                    .collect();
                let in_site: std::collections::HashSet<&str> = rewritten_sites
                    .iter()
                    .flat_map(|s| s.nodes.iter().map(String::as_str))
                    .collect();
                let type_readers: std::collections::HashSet<usize> = rewritten_sites
                    .iter()
                    .flat_map(|s| s.type_readers.iter().map(|r| r.node))
                    .collect();
                let g = m.proto().graph.as_ref().unwrap();
                let ng = rewritten.proto().graph.as_ref().unwrap();
                let by_name: std::collections::HashMap<&str, &NodeProto> =
                    ng.node.iter().map(|n| (n.name(), n)).collect();
                // Nodes that compute a site's parameters from constants (a Constant and a
                // CastLike for a softplus slope) go with the site when nothing kept reads them.
                let mut parameters: std::collections::HashSet<&str> = rewritten_sites
                    .iter()
                    .flat_map(|s| s.constants.iter().map(String::as_str))
                    .collect();
                for n in g.node.iter().rev() {
                    if n.output.iter().any(|o| parameters.contains(o.as_str())) {
                        parameters.extend(n.input.iter().map(String::as_str));
                    }
                }
                let read_after: std::collections::HashSet<&str> = ng
                    .node
                    .iter()
                    .flat_map(|n| n.input.iter().map(String::as_str))
                    .chain(ng.output.iter().map(|o| o.name()))
                    .collect();
                let read_outside: std::collections::HashSet<&str> = g
                    .node
                    .iter()
                    .filter(|n| !in_site.contains(n.name()))
                    .flat_map(|n| n.input.iter().map(String::as_str))
                    .collect();
                for (i, n) in g.node.iter().enumerate() {
                    if in_site.contains(n.name()) {
                        continue;
                    }
                    let Some(kept) = by_name.get(n.name()) else {
                        let parameter = n.output.iter().all(|o| {
                            parameters.contains(o.as_str()) && !read_after.contains(o.as_str())
                        });
                        assert!(
                            parameter,
                            "{what}: node '{}' ({}) was dropped",
                            n.name(),
                            n.op_type()
                        );
                        continue;
                    };
                    if type_readers.contains(&i) {
                        assert_eq!(
                            (
                                &kept.op_type,
                                &kept.output,
                                &kept.attribute,
                                kept.input.len()
                            ),
                            (&n.op_type, &n.output, &n.attribute, n.input.len()),
                            "{what}: type reader '{}'",
                            n.name()
                        );
                    } else {
                        assert_eq!(
                            kept.encode_to_vec(),
                            n.encode_to_vec(),
                            "{what}: node '{}'",
                            n.name()
                        );
                    }
                }
                let inits: std::collections::HashMap<&str, Vec<u8>> = ng
                    .initializer
                    .iter()
                    .map(|t| (t.name(), t.encode_to_vec()))
                    .collect();
                for t in &g.initializer {
                    let name = t.name();
                    if !read_outside.contains(name) {
                        continue;
                    }
                    match inits.get(name) {
                        Some(kept) => {
                            assert_eq!(kept, &t.encode_to_vec(), "{what}: initializer '{name}'")
                        }
                        None => assert!(
                            parameters.contains(name) && !read_after.contains(name),
                            "{what}: initializer '{name}' was dropped"
                        ),
                    }
                }
                checked += 1;
            }
        }
    }
    assert!(checked >= 60, "only {checked} conversions checked");
}
