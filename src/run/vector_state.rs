//! Leaves the CPU's vector registers as compiled code expects them after a call into tract.
//!
//! tract-linalg 0.23.9's hand-written x86-64 kernels (matrix products, sigmoid, tanh, SiLU)
//! return without `vzeroupper`, so the upper halves of the 256-bit registers stay in use. Every
//! later SSE instruction of the thread then waits on those halves (Intel CPUs from Skylake on,
//! from memory); on the AVX-512 Xeon this was measured on, glibc's `exp` ran 13-19 times slower
//! after a model had run, and a thread started then inherits the state. Clearing it costs one
//! instruction.

/// Clears the upper halves of the vector registers when the CPU has them (AVX); elsewhere it
/// does nothing.
pub(crate) fn settle() {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx") {
        // SAFETY: the CPU supports AVX, the only feature `zero_upper` is compiled for.
        unsafe { zero_upper() }
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
fn zero_upper() {
    std::arch::x86_64::_mm256_zeroupper();
}

#[cfg(all(test, target_arch = "x86_64"))]
mod tests {
    use std::arch::x86_64::{__cpuid_count, _xgetbv};

    use prost::Message;
    use tract_onnx::prelude::*;

    use super::settle;
    use crate::onnx::builder::{Dim, model, node, opset, value};
    use crate::onnx::proto::GraphProto;
    use crate::onnx::proto::tensor_proto::DataType;
    use crate::run::{NamedTensor, prepare};

    /// Whether the upper halves of the 256-bit registers hold anything: bit 2 (AVX state) of
    /// XINUSE, which `XGETBV` with ECX = 1 reads (Intel SDM, vol. 1, 13.6). `None` where the CPU
    /// cannot say (CPUID leaf 0Dh, sub-leaf 1, EAX bit 2).
    fn upper_halves_in_use() -> Option<bool> {
        #[target_feature(enable = "xsave")]
        fn xinuse() -> u64 {
            // SAFETY: called only where CPUID reports XGETBV with ECX = 1.
            unsafe { _xgetbv(1) }
        }
        let readable =
            std::arch::is_x86_feature_detected!("xsave") && __cpuid_count(0xD, 1).eax & 4 != 0;
        // SAFETY: the CPU supports XSAVE, the only feature `xinuse` is compiled for.
        readable.then(|| unsafe { xinuse() } & 4 != 0)
    }

    /// y = Sigmoid(x) over 1,024 floats: tract runs it with its vector kernel where the CPU has
    /// FMA.
    fn sigmoid_model() -> Vec<u8> {
        let graph = GraphProto {
            name: Some("g".into()),
            node: vec![node("Sigmoid", "s", &["x"], &["y"], vec![])],
            input: vec![value("x", DataType::Float, &[Dim::Size(1024)])],
            output: vec![value("y", DataType::Float, &[Dim::Size(1024)])],
            ..Default::default()
        };
        model(graph, vec![opset("", 17)], "test").encode_to_vec()
    }

    fn input() -> Tensor {
        tensor1(
            &(0..1024)
                .map(|i| i as f32 / 256.0 - 2.0)
                .collect::<Vec<f32>>(),
        )
    }

    /// Runs the model with tract's own optimized plan, not through the runner.
    fn run_with_tract_alone() {
        let plan = tract_onnx::onnx()
            .model_for_read(&mut sigmoid_model().as_slice())
            .unwrap()
            .into_optimized()
            .unwrap()
            .into_runnable()
            .unwrap();
        plan.run(tvec!(input().into_tvalue())).unwrap();
    }

    /// Whether this CPU can tell, and tract uses its FMA kernels on it.
    fn observable() -> bool {
        upper_halves_in_use().is_some() && std::arch::is_x86_feature_detected!("fma")
    }

    /// The defect: tract's own plan, run directly, leaves the upper halves in use; `settle`
    /// clears them. When this fails on a CPU with FMA, tract has fixed it and `settle` can go.
    #[test]
    fn tract_kernels_leave_the_upper_halves_in_use_and_settle_clears_them() {
        if !observable() {
            return;
        }
        run_with_tract_alone();
        assert_eq!(upper_halves_in_use(), Some(true), "tract left them in use");
        settle();
        assert_eq!(upper_halves_in_use(), Some(false));
    }

    /// A call into tract through the runner returns with them cleared, even when they were in
    /// use before it.
    #[test]
    fn the_runner_returns_with_the_upper_halves_cleared() {
        if !observable() {
            return;
        }
        run_with_tract_alone();
        let tract = prepare(&sigmoid_model(), None).unwrap();
        let x = NamedTensor {
            name: "x".into(),
            tensor: input(),
        };
        let y = tract.run(&[x], &[]).unwrap();
        assert_eq!(upper_halves_in_use(), Some(false));
        // Sigmoid(0) = 0.5 (ONNX operator spec): input index 512 is 0.
        assert_eq!(
            y[0].tensor.to_plain_array_view::<f32>().unwrap()[[512]],
            0.5
        );
    }
}
