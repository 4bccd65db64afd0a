"""Reference figures for the drift metrics, computed with numpy on fixed arrays.

Prints JSON; tests/measure_metrics.rs carries the printed numbers. Needs only numpy
(scripts/requirements-ci.txt pins the version). Nothing random: the arrays are written out below.

Definitions (the ones actswap documents):
- elements where both values are finite are compared; max abs, mean abs, RMS, max rel and cosine
  are over those;
- max rel = max |cand - ref| / max(|ref|, floor), floor 1e-6;
- beyond tolerance = not numpy.isclose(cand, ref, rtol=1e-4, atol=1e-5), i.e.
  |cand - ref| > atol + rtol * |ref|, counting non-finite mismatches as beyond;
- a NaN on one side only is a NaN mismatch; an infinity facing a different finite or infinite
  value is an infinity mismatch; equal infinities and NaN facing NaN agree;
- top-1 = numpy.argmax over the last axis (first maximum wins, NaN counts as the maximum);
- percentiles = numpy.percentile with the default linear method.
"""

import json

import numpy as np

FLOOR = 1e-6
ATOL = 1e-5
RTOL = 1e-4


def drift(ref, cand):
    ref = np.asarray(ref, dtype=np.float64)
    cand = np.asarray(cand, dtype=np.float64)
    finite = np.isfinite(ref) & np.isfinite(cand)
    nan_mm = np.isnan(ref) ^ np.isnan(cand)
    inf_mm = ~finite & ~nan_mm & ~(np.isnan(ref) & np.isnan(cand)) & (ref != cand)
    a, b = ref[finite], cand[finite]
    d = np.abs(b - a)
    beyond = int(np.count_nonzero(~np.isclose(b, a, rtol=RTOL, atol=ATOL))) + int(
        np.count_nonzero(nan_mm | inf_mm)
    )
    na, nb = np.linalg.norm(a), np.linalg.norm(b)
    cosine = 1.0 if na == 0 and nb == 0 else float(np.dot(a, b) / (na * nb))
    return {
        "elements": int(ref.size),
        "compared": int(finite.sum()),
        "max_abs": float(d.max()),
        "mean_abs": float(d.mean()),
        "rms": float(np.sqrt(np.mean(d * d))),
        "max_rel": float((d / np.maximum(np.abs(a), FLOOR)).max()),
        "cosine": cosine,
        "beyond_tol": beyond,
        "beyond_tol_share": beyond / ref.size,
        "nan_mismatches": int(nan_mm.sum()),
        "inf_mismatches": int(inf_mm.sum()),
    }


plain_ref = [0.0, 1.0, -2.0, 3.5, 1e-7, -4.25, 100.0, 0.5]
plain_cand = [1e-6, 1.00002, -2.001, 3.5, 2e-7, -4.0, 100.05, 0.49]

odd_ref = [1.0, np.nan, np.inf, -np.inf, 2.0, np.nan, 3.0, -1.5]
odd_cand = [1.25, 1.0, np.inf, np.inf, np.nan, np.nan, 3.0, -1.0]

top1_ref = np.array([[0.1, 0.7, 0.2, 0.0], [1.0, 1.0, 0.5, 0.2], [3.0, -1.0, 2.0, 2.5]])
top1_cand = np.array([[0.1, 0.6, 0.65, 0.0], [0.9, 1.0, 0.5, 0.2], [np.nan, 0.0, 0.0, 4.0]])

range_values = np.array(
    [-3.0, 0.5, 7.25, -0.125, 2.0, 1.0, -8.5, 4.0, 0.0, 3.3, -1.1, 6.6, 2.2, -5.5, 9.0]
)

print(
    json.dumps(
        {
            "numpy": np.__version__,
            "plain": drift(plain_ref, plain_cand),
            "odd": drift(odd_ref, odd_cand),
            "top1_ref": np.argmax(top1_ref, axis=-1).tolist(),
            "top1_cand": np.argmax(top1_cand, axis=-1).tolist(),
            "range": {
                "min": float(range_values.min()),
                "max": float(range_values.max()),
                "p01": float(np.percentile(range_values, 1)),
                "p99": float(np.percentile(range_values, 99)),
                "p10": float(np.percentile(range_values, 10)),
                "p50": float(np.percentile(range_values, 50)),
                "p90": float(np.percentile(range_values, 90)),
            },
        },
        indent=1,
    )
)
