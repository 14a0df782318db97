"""Render the design-review report of every sample design to PNG, to look at (needs headless Chromium).

    python tools/report_screenshots.py OUTDIR [SAMPLE ...]
    python tools/report_screenshots.py --docs

Each report is photographed as a tall page and cut into screens of 1100 x 1400 pixels
(``<sample>-1.png``, ``<sample>-2.png``...).  ``--docs`` writes the first screens of two
samples to docs/screenshots/ (``report-<sample>.png``), with a measurement laid over one of them.
"""

from __future__ import annotations

import io
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

WIDTH, SCREEN, TALL = 1100, 1400, 12000


def render(sample: Path, measured: tuple | None = None) -> list:
    """The report of ``sample`` as a list of PIL images, one per screen."""
    from PIL import Image

    from loopkit import load_design
    from loopkit.loop import design_loop
    from loopkit.measured import read_measurement
    from loopkit.measured_overlay import measured_overlay
    from loopkit.report import html_to_png, report_html

    result = design_loop(load_design(sample))
    overlays = []
    if measured:
        path, kind, corner = measured
        overlays.append(measured_overlay(result, read_measurement(path, kind), corner))
    text = report_html(result, path=f"sample_designs/{sample.name}", overlays=overlays)
    im = Image.open(io.BytesIO(html_to_png(text, None, WIDTH, TALL))).convert("RGB")
    # the page ends where the last non-white row is
    gray = im.convert("L")
    bottom = TALL
    while bottom > SCREEN and gray.crop((0, bottom - 200, WIDTH, bottom)).getextrema()[0] > 250:
        bottom -= 200
    return [im.crop((0, top, WIDTH, min(top + SCREEN, bottom))) for top in range(0, bottom, SCREEN)]


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    samples = sorted((ROOT / "sample_designs").glob("*.toml"))
    if argv[:1] == ["--docs"]:
        out = ROOT / "docs" / "screenshots"
        shots = [("buck_24v_3v3", ("tests/data/buck_plant_24v_3a.csv", "plant", 5), 0),
                 ("boost_liion_5v", ("tests/data/boost_loop_3v6_0a75.csv", "loop", 4), 1)]
        for name, measured, screen in shots:
            images = render(ROOT / "sample_designs" / f"{name}.toml", (str(ROOT / measured[0]),) + measured[1:])
            images[screen].save(out / f"report-{name}.png", optimize=True)
            print(out / f"report-{name}.png")
        return 0
    if not argv:
        print(__doc__, file=sys.stderr)
        return 2
    out = Path(argv[0])
    out.mkdir(parents=True, exist_ok=True)
    chosen = [s for s in samples if not argv[1:] or s.stem in argv[1:]]
    for sample in chosen:
        for i, im in enumerate(render(sample), 1):
            im.save(out / f"{sample.stem}-{i}.png")
        print(sample.stem, i)
    return 0


if __name__ == "__main__":
    sys.exit(main())
