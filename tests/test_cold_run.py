"""A cold ``kickback run`` (issue 18): the faster PNG writer gives matplotlib's own pixels.

The speed itself is measured by ``benchmarks/bench_cold.py`` (a benchmark, not a timed test).
"""

from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
CASE = ROOT / "cases" / "irrigation_valve.toml"


def _decoded(png: bytes):
    import io

    import numpy as np
    from PIL import Image

    img = Image.open(io.BytesIO(png))
    return img.mode, img.info.get("dpi"), np.asarray(img.convert("RGBA"))


def _matplotlib_png(fig) -> bytes:
    """matplotlib's own PNG of ``fig`` (RGBA), the reference the faster writer must match."""
    import io

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=130)
    return buf.getvalue()


def test_opaque_png_has_matplotlibs_pixels():
    from kickback.caseio import load_case
    from kickback.outputs.plots import figure_bytes
    from kickback.simulation import simulate

    fig, _ = simulate(load_case(CASE)).plot()
    mode, dpi, pixels = _decoded(figure_bytes(fig, "png"))
    ref_mode, ref_dpi, ref_pixels = _decoded(_matplotlib_png(fig))
    assert (mode, ref_mode) == ("RGB", "RGBA")
    assert dpi == pytest.approx(ref_dpi)
    assert pixels.shape == ref_pixels.shape and (pixels == ref_pixels).all()


def test_see_through_figure_keeps_its_alpha():
    from matplotlib.figure import Figure

    from kickback.outputs.plots import figure_bytes

    fig = Figure(figsize=(2, 1), facecolor="none")
    fig.add_subplot().plot([0, 1], [1, 0])
    mode, _, pixels = _decoded(figure_bytes(fig, "png"))
    assert mode == "RGBA" and pixels[..., 3].min() == 0
    assert (pixels == _decoded(_matplotlib_png(fig))[2]).all()
