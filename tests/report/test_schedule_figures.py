"""Gain-map figure: which entries are chosen, which slice is drawn, refused nodes marked.

Synthetic schedules (drawing input only, no model): every gain entry is a
known function of the node's grid indices (values by construction, so the
expected numbers are hand-computed), and the values written into the
heat-map cells say which slice was drawn.  The other checks are structural
(files decode and parse, marked elements are present).
"""

from __future__ import annotations

import itertools
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from matplotlib.image import imread

from linobs.errors import UsageError
from linobs.estimator.node import NodeDesign
from linobs.estimator.schedule import ScheduleData
from linobs.report.schedule_figures import gain_maps, largest_gains

STATES, OUTPUTS = ["x1", "x2"], ["y1"]


def node(L: list[list[float]] | None) -> NodeDesign:
    """A node with a 2-state, 1-output local model; ``L=None`` makes it refused."""
    z2, z1 = np.zeros((2, 2)), np.zeros((2, 1))
    return NodeDesign(status="ok" if L is not None else "refused",
                      message="" if L is not None else "unobservable mode",
                      kind="luenberger", domain="discrete", form="predictor", sample_time=1.0,
                      states=STATES, inputs=["u"], outputs=OUTPUTS, x0=[0, 0], u0=[0], y0=[0],
                      dx0=[0, 0], A=z2, B=z1, C=[[1.0, 0.0]], D=[[0.0]], Phi=np.eye(2),
                      Gamma=z1, Gamma0=z2, L=L if L is not None else [])


def tensor_schedule(shape: tuple[int, ...], refused: set[int] = frozenset()) -> ScheduleData:
    """Axes a, b, c, ...; L[x1,y1] = i + 10 j + 100 k (grid indices), L[x2,y1] = −0.5 (flat)."""
    names = "abcd"[: len(shape)]
    nodes = []
    for flat, idx in enumerate(itertools.product(*[range(n) for n in shape])):  # C order
        value = float(sum(i * 10 ** d for d, i in enumerate(idx)))
        nodes.append(node(None if flat in refused else [[value], [-0.5]]))
    return ScheduleData(grid_kind="tensor", axes=list(names),
                        axis_values=[list(np.linspace(1.0, 2.0, n)) for n in shape],
                        axis_roles={n: "input" for n in names}, nodes=nodes)


def svg_text(paths: list[Path]) -> str:
    png, svg = paths
    assert png.suffix == ".png" and svg.suffix == ".svg" and png.is_file() and svg.is_file()
    image = imread(png)                                  # decodes
    assert image.ndim == 3 and min(image.shape[:2]) > 100
    root = ET.parse(svg).getroot()                       # parses
    assert root.tag.endswith("svg")
    return " ".join(el.text or "" for el in root.iter())


def test_largest_gains_rank_by_peak_magnitude_with_and_without_scales() -> None:
    # hand-computed: on the 3 × 3 grid the peaks |L| are 2 + 10·2 = 22 (x1) and 0.5 (x2) in
    # model units; with s(x1) = 1000, s(x2) = 0.1, s(y1) = 1 the scaled peaks are 0.022 and 5,
    # so the order flips.
    data = tensor_schedule((3, 3))
    plain = largest_gains(data, 2)
    assert [e.name for e in plain] == ["L[x1,y1]", "L[x2,y1]"]
    assert plain[0].peak == pytest.approx(22.0) and plain[1].peak == pytest.approx(0.5)
    scaled = largest_gains(data, 2, {"x1": 1000.0, "x2": 0.1, "y1": 1.0})
    assert [e.name for e in scaled] == ["L[x2,y1]", "L[x1,y1]"]
    assert scaled[0].score == pytest.approx(5.0) and scaled[1].score == pytest.approx(0.022)
    assert len(largest_gains(data, 1)) == 1


def cell_values(svg: Path, entry: str = "0-0") -> dict[tuple[int, int], str]:
    """The values written into the heat-map cells of one entry: (i, j) -> text."""
    out = {}
    for el in ET.parse(svg).getroot().iter():
        gid = el.get("id") or ""
        if gid.startswith(f"value-{entry}-"):
            i, j = map(int, gid.rsplit("-", 2)[1:])
            out[(i, j)] = " ".join(t.strip() for t in el.itertext() if t.strip())
    return out


def test_heat_maps_show_the_middle_slice_and_mark_refused_nodes(tmp_path: Path) -> None:
    # grid 3 × 2 × 3 (a, b, c); the middle of c is index 1, so the cells of L[x1,y1] read
    # i + 10 j + 100.  Node (i=1, j=0, k=1) is refused: flat index 1·6 + 0·3 + 1 = 7.
    data = tensor_schedule((3, 2, 3), refused={7})
    text = svg_text(gain_maps(data, out_stem=tmp_path / "gains",
                              units={"a": "K", "x1": "m", "y1": "V"}, title="demo"))
    assert "L[x1,y1]" in text and "L[x2,y1]" in text and "demo" in text
    assert "slice at the middle grid value c = 1.5" in text
    expected = {(i, j): str(i + 10 * j + 100) for i in range(3) for j in range(2)}
    del expected[(1, 0)]                              # refused: no value, a hatched cell
    assert cell_values(tmp_path / "gains.svg") == expected
    assert "refused node, no design (1)" in text
    svg = (tmp_path / "gains.svg").read_text(encoding="utf-8")
    assert 'id="refused-cell' in svg and 'id="gain-mesh' in svg
    assert "a [K]" in text and "L[x1,y1] [m/V]" in text


def test_fixed_value_selects_another_slice(tmp_path: Path) -> None:
    data = tensor_schedule((2, 2, 3))
    text = svg_text(gain_maps(data, out_stem=tmp_path / "g", fixed={"c": 1.9}))
    assert "slice at c = 2" in text                   # the nearest grid value to 1.9
    assert cell_values(tmp_path / "g.svg") == {(i, j): str(i + 10 * j + 200)
                                               for i in range(2) for j in range(2)}


def test_one_axis_draws_lines_with_refused_nodes(tmp_path: Path) -> None:
    data = tensor_schedule((5,), refused={2})
    text = svg_text(gain_maps(data, out_stem=tmp_path / "line", entries=1))
    assert "L[x1,y1]" in text and "refused node (1)" in text
    svg = (tmp_path / "line.svg").read_text(encoding="utf-8")
    assert 'id="gain-line' in svg and 'id="refused-node' in svg


def test_scattered_nodes_are_points(tmp_path: Path) -> None:
    base = tensor_schedule((3, 3), refused={4})
    points = [[float(a), float(b)] for a in base.axis_values[0] for b in base.axis_values[1]]
    data = ScheduleData(grid_kind="scattered", axes=base.axes, points=points,
                        axis_roles=base.axis_roles, nodes=base.nodes)
    gain_maps(data, out_stem=tmp_path / "sc")
    svg = (tmp_path / "sc.svg").read_text(encoding="utf-8")
    assert 'id="gain-points' in svg and 'id="refused-points' in svg


def test_bad_requests_are_refused(tmp_path: Path) -> None:
    data = tensor_schedule((2, 2, 2))
    with pytest.raises(UsageError, match="not a scheduling axis"):
        gain_maps(data, out_stem=tmp_path / "x", axes=["a", "z"])
    with pytest.raises(UsageError, match="cannot also be fixed"):
        gain_maps(data, out_stem=tmp_path / "x", fixed={"a": 1.0})
    every = tensor_schedule((2, 2), refused={0, 1, 2, 3})
    with pytest.raises(UsageError, match="no node of the schedule has a design"):
        gain_maps(every, out_stem=tmp_path / "x")
    assert not list(tmp_path.iterdir())               # nothing written on refusal
