//! The five sample models. Every scenario is invented; every weight is random.

use actswap::onnx::builder::{Dim, attr_f, attr_g, attr_i, attr_ints, attr_s, model, opset, value};
use actswap::onnx::proto::{ModelProto, ValueInfoProto, tensor_proto::DataType};

use crate::net::{Net, Param, Record};

/// What a sample is, apart from its graph.
pub struct About {
    pub file: &'static str,
    pub scenario: &'static str,
    pub description: &'static str,
    pub opset: i64,
    /// Seed of the weights; the calibration input uses `seed + 1000`.
    pub seed: u64,
    /// Input and output names with shapes; dimension 0 is the symbolic `batch`.
    pub input: (&'static str, Vec<i64>),
    pub output: (&'static str, Vec<i64>),
}

/// A finished sample model and what it holds.
pub struct Sample {
    pub about: About,
    pub proto: ModelProto,
    pub record: Record,
}

/// All samples, in the order of the README.
pub fn all() -> Vec<Sample> {
    vec![
        orchard_grader(),
        pump_vibration(),
        door_chime_keywords(),
        greenhouse_climate(),
        beehive_acoustics(),
    ]
}

/// The smallest IR version that carries the opset, as onnx 1.23.2's
/// `onnx.helper.find_min_ir_version_for` gives it, and never below 8.
fn ir_version(opset: i64) -> i64 {
    match opset {
        ..=18 => 8,
        19 | 20 => 9,
        21 | 22 => 10,
        23 => 11,
        24 => 12,
        25..=27 => 13,
        _ => 14,
    }
}

/// A float tensor of shape `[batch, dims[1..]]`.
fn batched(name: &str, dims: &[i64]) -> ValueInfoProto {
    let mut d = vec![Dim::Named("batch")];
    d.extend(dims[1..].iter().map(|&v| Dim::Size(v)));
    value(name, DataType::Float, &d)
}

fn finish(net: Net, about: About) -> Sample {
    let graph_name = about.file.trim_end_matches(".onnx").replace('-', "_");
    let doc = format!(
        "{}. Random weights, for demonstration only.",
        about.description
    );
    let (graph, record) = net.into_graph(
        &graph_name,
        &doc,
        vec![batched(about.input.0, &about.input.1)],
        vec![batched(about.output.0, &about.output.1)],
    );
    let mut proto = model(graph, vec![opset("", about.opset)], "actswap-samples");
    proto.ir_version = Some(ir_version(about.opset));
    Sample {
        about,
        proto,
        record,
    }
}

/// Fruit-grading convnet: SiLU, per-channel swish after a folded batch norm, hard-swish via
/// HardSigmoid, ReLU6 via Clip.
fn orchard_grader() -> Sample {
    let seed = 101;
    let mut n = Net::new(seed, &["image"]);
    let x = n.conv("stem.conv", "image", 3, 8, &[3, 3], 2);
    n.calibrate(&x);
    let x = n.silu(&x, "stem.act", false);

    let c = n.conv("block1.conv", &x, 8, 12, &[3, 3], 1);
    let scale = n.uniform(12, 0.6, 1.4);
    let shift = n.uniform(12, -0.5, 0.5);
    let scale = n.init("block1.bn.scale", &[1, 12, 1, 1], &scale);
    let shift = n.init("block1.bn.shift", &[1, 12, 1, 1], &shift);
    let m = n.op("Mul", "block1.bn.mul", &[&c, &scale], vec![]);
    let bn = n.op("Add", "block1.bn", &[&m, &shift], vec![]);
    n.calibrate(&bn);
    let x = n.swish_per_channel(&bn, "block1.act", &[1, 12, 1, 1]);

    let x = n.conv("block2.conv", &x, 12, 16, &[3, 3], 2);
    n.calibrate(&x);
    let x = n.hard_swish_hard_sigmoid(&x, "block2.act");

    let x = n.conv("block3.conv", &x, 16, 16, &[3, 3], 1);
    n.calibrate(&x);
    let x = n.relu6_clip_constant_nodes(&x, "block3.act");

    let p = n.op("GlobalAveragePool", "head.pool", &[&x], vec![]);
    let f = n.op("Flatten", "head.flat", &[&p], vec![attr_i("axis", 1)]);
    let y = n.gemm("grade", &f, 16, 5);
    n.calibrate(&y);
    finish(
        n,
        About {
            file: "orchard-grader.onnx",
            scenario: "fruit grading on a packing line",
            description: "Fruit-grading convnet: 32x32 RGB crop to 5 grade scores",
            opset: 13,
            seed,
            input: ("image", vec![-1, 3, 32, 32]),
            output: ("grade", vec![-1, 5]),
        },
    )
}

/// Vibration-anomaly MLP: exact and tanh GELU sharing their 0.5 and 1 constants, Mish, and
/// swish with beta = 1.702 from a Constant node.
fn pump_vibration() -> Sample {
    let seed = 102;
    let mut n = Net::new(seed, &["spectrum"]);
    let half = n.scalar("gelu.half", 0.5);
    let one = n.scalar("gelu.one", 1.0);
    let x = n.gemm("fc1", "spectrum", 64, 32);
    n.calibrate(&x);
    let x = n.gelu_erf(&x, "fc1.act", &half, &one);
    let x = n.gemm("fc2", &x, 32, 32);
    n.calibrate(&x);
    let x = n.gelu_tanh(&x, "fc2.act", &half, &one);
    let x = n.gemm("fc3", &x, 32, 32);
    n.calibrate(&x);
    let x = n.mish(&x, "fc3.act");
    let x = n.gemm("fc4", &x, 32, 16);
    n.calibrate(&x);
    let x = n.swish_constant_node(&x, "fc4.act", 1.702);
    let y = n.gemm("anomaly", &x, 16, 1);
    n.calibrate(&y);
    finish(
        n,
        About {
            file: "pump-vibration.onnx",
            scenario: "pump vibration monitoring",
            description: "Vibration-anomaly MLP: 64-bin spectrum to one anomaly score",
            opset: 13,
            seed,
            input: ("spectrum", vec![-1, 64]),
            output: ("anomaly", vec![-1, 1]),
        },
    )
}

/// Keyword-spotting block (Conv1d, opset 11): hard-swish as x*ReLU6(x+3)/6, a sigmoid gate
/// that is not a swish, and an If whose branches hold SiLU and ReLU.
fn door_chime_keywords() -> Sample {
    let seed = 103;
    let mut n = Net::new(seed, &["mfcc"]);
    let x = n.conv("stem.conv", "mfcc", 20, 16, &[3], 1);
    n.calibrate(&x);
    let x = n.hard_swish_relu6(&x, "stem.act");

    let a = n.conv("gate.a.conv", &x, 16, 16, &[3], 1);
    n.calibrate(&a);
    let b = n.conv("gate.b.conv", &x, 16, 16, &[3], 1);
    n.calibrate(&b);
    let g = n.sigmoid_gate(&a, &b, "gate");
    let mix = n.conv("mix.conv", &g, 16, 16, &[1], 1);
    n.calibrate(&mix);

    // Loud clips (mean coefficient above 0) take SiLU, quiet ones ReLU.
    let level = n.op(
        "ReduceMean",
        "branch.level",
        &["mfcc"],
        vec![attr_i("keepdims", 0)],
    );
    let zero = n.scalar("branch.zero", 0.0);
    let cond = n.op("Greater", "branch.cond", &[&level, &zero], vec![]);
    let shape = [-1, 16, 49];
    let then_branch = n.subgraph("branch.if", "then_branch", |n| {
        let y = n.silu(&mix, "branch.then.act", false);
        vec![batched(&y, &shape)]
    });
    let else_branch = n.subgraph("branch.if", "else_branch", |n| {
        let y = n.fused("relu", "Relu", &mix, "branch.else.act", vec![], vec![]);
        vec![batched(&y, &shape)]
    });
    let branches = vec![
        attr_g("then_branch", then_branch),
        attr_g("else_branch", else_branch),
    ];
    let act = n.op("If", "branch.if", &[&cond], branches);

    let p = n.op(
        "ReduceMean",
        "head.pool",
        &[&act],
        vec![attr_ints("axes", &[2]), attr_i("keepdims", 1)],
    );
    let f = n.op("Flatten", "head.flat", &[&p], vec![attr_i("axis", 1)]);
    let y = n.gemm("keyword", &f, 16, 4);
    n.calibrate(&y);
    finish(
        n,
        About {
            file: "door-chime-keywords.onnx",
            scenario: "keyword spotting for a door chime",
            description: "Keyword-spotting block: 20 MFCCs x 49 frames to 4 keyword scores",
            opset: 11,
            seed,
            input: ("mfcc", vec![-1, 20, 49]),
            output: ("keyword", vec![-1, 4]),
        },
    )
}

/// Climate regressor MLP (opset 20): one fused activation op after each layer, layers
/// alternating Gemm and MatMul + Add.
fn greenhouse_climate() -> Sample {
    let seed = 104;
    let mut n = Net::new(seed, &["sensors"]);
    let s = |v: f32| Param::Scalar(v);
    // Selu's defaults as float32 (ONNX Selu schema).
    let (selu_a, selu_g) = (1.673_263_2_f32, 1.050_701_f32);
    #[allow(clippy::type_complexity)]
    let acts: Vec<(&str, &str, Vec<_>, Vec<(&str, Param)>)> = vec![
        ("gelu", "Gelu", vec![], vec![]),
        (
            "gelu_tanh",
            "Gelu",
            vec![attr_s("approximate", "tanh")],
            vec![],
        ),
        ("hard_swish", "HardSwish", vec![], vec![]),
        ("mish", "Mish", vec![], vec![]),
        (
            "hard_sigmoid",
            "HardSigmoid",
            vec![],
            vec![("alpha", s(0.2)), ("beta", s(0.5))],
        ),
        (
            "leaky_relu",
            "LeakyRelu",
            vec![attr_f("alpha", 0.1)],
            vec![("alpha", s(0.1))],
        ),
        (
            "elu",
            "Elu",
            vec![attr_f("alpha", 0.7)],
            vec![("alpha", s(0.7))],
        ),
        (
            "selu",
            "Selu",
            vec![],
            vec![("alpha", s(selu_a)), ("gamma", s(selu_g))],
        ),
        (
            "celu",
            "Celu",
            vec![attr_f("alpha", 1.5)],
            vec![("alpha", s(1.5))],
        ),
        ("softplus", "Softplus", vec![], vec![]),
        ("softsign", "Softsign", vec![], vec![]),
        (
            "thresholded_relu",
            "ThresholdedRelu",
            vec![],
            vec![("alpha", s(1.0))],
        ),
        ("prelu", "PRelu", vec![], vec![]),
        ("relu", "Relu", vec![], vec![]),
        ("tanh", "Tanh", vec![], vec![]),
        ("sigmoid", "Sigmoid", vec![], vec![]),
        ("relu6", "Clip", vec![], vec![]),
    ];
    let width = 16;
    let mut x = "sensors".to_string();
    for (i, (kind, op, attrs, params)) in acts.into_iter().enumerate() {
        let layer = format!("dense{:02}", i + 1);
        let h = if i % 2 == 0 {
            n.gemm(&layer, &x, width, width)
        } else {
            n.matmul_add(&layer, &x, width, width)
        };
        n.calibrate(&h);
        let out = format!("{layer}.act");
        x = match op {
            "PRelu" => n.prelu(&h, &out, width),
            "Clip" => n.relu6_clip(&h, &out),
            _ => n.fused(kind, op, &h, &out, attrs, params),
        };
    }
    let y = n.gemm("setpoints", &x, width, 3);
    n.calibrate(&y);
    finish(
        n,
        About {
            file: "greenhouse-climate.onnx",
            scenario: "greenhouse climate control",
            description: "Climate regressor MLP: 16 sensor readings to 3 setpoints",
            opset: 20,
            seed,
            input: ("sensors", vec![-1, 16]),
            output: ("setpoints", vec![-1, 3]),
        },
    )
}

/// Small Conv1d audio model (opset 24): the Swish op with alpha 1.5, x * HardSigmoid(x) at the
/// ONNX defaults (not hard-swish), and SiLU written Mul(sigmoid(x), x).
fn beehive_acoustics() -> Sample {
    let seed = 105;
    let mut n = Net::new(seed, &["audio"]);
    let x = n.conv("stem.conv", "audio", 1, 8, &[9], 4);
    n.calibrate(&x);
    let swish = vec![("beta", Param::Scalar(1.5))];
    let x = n.fused(
        "swish",
        "Swish",
        &x,
        "stem.act",
        vec![attr_f("alpha", 1.5)],
        swish,
    );
    let x = n.conv("block1.conv", &x, 8, 8, &[5], 2);
    n.calibrate(&x);
    let x = n.x_times_default_hard_sigmoid(&x, "block1.act");
    let x = n.conv("block2.conv", &x, 8, 12, &[3], 2);
    n.calibrate(&x);
    let x = n.silu(&x, "block2.act", true);
    let p = n.op("GlobalAveragePool", "head.pool", &[&x], vec![]);
    let f = n.op("Flatten", "head.flat", &[&p], vec![attr_i("axis", 1)]);
    let y = n.gemm("hive_state", &f, 12, 3);
    n.calibrate(&y);
    finish(
        n,
        About {
            file: "beehive-acoustics.onnx",
            scenario: "beehive health from hive audio",
            description: "Hive-sound classifier: 256 audio samples to 3 colony states",
            opset: 24,
            seed,
            input: ("audio", vec![-1, 1, 256]),
            output: ("hive_state", vec![-1, 3]),
        },
    )
}
