#!/usr/bin/env python3
"""Renders an audit's HTML report in headless Chromium and checks the screenshot.

    python3 scripts/render_report.py [TARGET_DIR] [--png OUT.png]

Runs `TARGET_DIR/debug/actswap audit` (TARGET_DIR defaults to `target`; build it first with
`cargo build --bin actswap`) on a sample model with `--report`, has Chromium (Debian's
`chromium` package, /usr/bin/chromium) take a 1280x3000 screenshot of the file with no network
and a fresh profile, and checks that the PNG has that size and is not blank: it must hold many
colours, a fair share of non-background pixels, and the report's own plot colours (so the SVG
plots were drawn, not just the text). Needs Pillow (requirements-ci.txt).
"""

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

from PIL import Image

ROOT = Path(__file__).resolve().parent.parent
CHROMIUM = "/usr/bin/chromium"
SIZE = (1280, 3000)

# Colours of src/report/html/style.rs that only the plots and the caution box use.
COLOURS = {
    "original curve": (0x1F, 0x6F, 0xB2),
    "replacement curve": (0xE0, 0x7B, 0x12),
    "error curve": (0xC2, 0x36, 0x2B),
    "local drift bars": (0x2F, 0x5D, 0x8C),
    "propagated drift bars": (0xC9, 0x96, 0x2A),
    "caution box": (0xFF, 0xF6, 0xE3),
}


def build_report(actswap: Path, out: Path) -> None:
    cmd = [
        str(actswap), "audit", "sample-models/orchard-grader.onnx",
        "--target", "piecewise-linear", "--dim", "batch=1", "--samples", "2",
        "--runs", "3", "--warmup", "1", "--report", str(out),
    ]
    run = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT)
    # 0 within budget, 1 over budget or unserved: the report is written either way.
    if run.returncode not in (0, 1) or not out.is_file():
        sys.exit(f"render_report: audit failed ({run.returncode}): {run.stderr.strip()}")


def screenshot(html: Path, png: Path, profile: Path) -> None:
    cmd = [
        CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
        "--no-first-run", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", "--hide-scrollbars", f"--user-data-dir={profile}",
        f"--screenshot={png}", f"--window-size={SIZE[0]},{SIZE[1]}", html.as_uri(),
    ]
    run = subprocess.run(cmd, capture_output=True, text=True, timeout=180)
    if run.returncode != 0 or not png.is_file():
        sys.exit(f"render_report: chromium failed ({run.returncode}): {run.stderr.strip()[-2000:]}")


def near(a, b, tol=28):
    return all(abs(x - y) <= tol for x, y in zip(a, b))


def check(png: Path) -> str:
    img = Image.open(png).convert("RGB")
    if img.size != SIZE:
        sys.exit(f"render_report: screenshot is {img.size}, expected {SIZE}")
    colours = img.getcolors(maxcolors=1 << 24)
    colours.sort(reverse=True)
    total = SIZE[0] * SIZE[1]
    background_share = colours[0][0] / total
    if len(colours) < 200 or background_share > 0.9:
        sys.exit(
            f"render_report: screenshot looks blank: {len(colours)} colours, "
            f"{background_share:.1%} background"
        )
    missing = []
    for what, rgb in COLOURS.items():
        pixels = sum(n for n, c in colours if near(c, rgb, 6 if what == "caution box" else 28))
        if pixels < 150:
            missing.append(f"{what} ({pixels} px)")
    if missing:
        sys.exit("render_report: not drawn: " + ", ".join(missing))
    return f"{len(colours)} colours, {background_share:.1%} background"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("target_dir", nargs="?", default=str(ROOT / "target"))
    ap.add_argument("--png", type=Path, help="keep the screenshot here")
    args = ap.parse_args()
    actswap = Path(args.target_dir).resolve() / "debug" / "actswap"
    if not actswap.is_file():
        sys.exit(f"render_report: no {actswap}; run `cargo build --bin actswap` first")
    if not Path(CHROMIUM).is_file():
        sys.exit(f"render_report: no {CHROMIUM}; install Debian's chromium package")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        html, png = tmp / "report.html", tmp / "report.png"
        build_report(actswap, html)
        screenshot(html, png, tmp / "profile")
        figures = check(png)
        if args.png:
            shutil.copyfile(png, args.png)
    print(f"render_report: report rendered at {SIZE[0]}x{SIZE[1]}, {figures}: ok")


if __name__ == "__main__":
    main()
