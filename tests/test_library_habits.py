"""Habits of library code (issue 10): the user's matplotlib backend is never switched, and pyplot's
global figure state is never used, in socfuse.models or socfuse.estimator (figures are plain
``matplotlib.figure.Figure`` objects).  Checked on the source text, plus one behavioural check."""
from __future__ import annotations

import re
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
LIBRARY = [p for d in ("models", "estimator", "socfuse") for p in (REPO / d).rglob("*.py")]


def test_no_backend_switch_or_pyplot_in_library_code():
    assert len(LIBRARY) > 40
    bad = [f"{p.relative_to(REPO)}: {m.group(0)}" for p in LIBRARY
           for m in re.finditer(r"matplotlib\.use\(|import matplotlib\.pyplot|from matplotlib import pyplot",
                                p.read_text())]
    assert bad == []


def test_making_a_figure_leaves_the_backend_alone(tmp_path):
    import matplotlib

    from socfuse.models.identify.plots import _plt

    before = matplotlib.get_backend()
    fig, ax = _plt().subplots(figsize=(2, 2))
    ax.plot([0, 1], [0, 1])
    fig.savefig(tmp_path / "f.png")
    assert matplotlib.get_backend() == before and (tmp_path / "f.png").stat().st_size > 0
