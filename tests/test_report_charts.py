"""The inline SVG charts: bars proportional to the counts, small counts hidden, text escaped."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import numpy as np
import pytest
from sklearn.datasets import load_iris

from studylog import charts

SVG = "{http://www.w3.org/2000/svg}"


def _bars(svg: str) -> list[ET.Element]:
    root = ET.fromstring(svg)  # well-formed XML, or this raises
    assert root.tag == f"{SVG}svg" and root.get("role") == "img"
    return root.findall(f"{SVG}rect")


def test_histogram_bars_follow_numpys_counts_of_iris() -> None:
    # Fisher's iris data (Fisher 1936) as bundled by scikit-learn: 150 sepal lengths; numpy.histogram
    # is the outside reference for the bin counts
    sepal = load_iris().data[:, 0]
    counts, edges = np.histogram(sepal, bins=10)
    assert counts.sum() == 150  # 150 flowers (scikit-learn's description of the data set)
    svg = charts.histogram(edges.tolist(), counts.tolist(), min_cell=1)
    assert svg is not None
    heights = [float(r.get("height")) for r in _bars(svg)]
    assert len(heights) == 10
    tallest = max(heights)
    assert heights == pytest.approx([tallest * c / counts.max() for c in counts], rel=1e-3)
    assert "4.3" in svg and "7.9" in svg  # the end labels: iris sepal length runs from 4.3 to 7.9 cm


def test_small_bins_are_drawn_at_the_threshold_and_never_show_their_count() -> None:
    svg = charts.histogram([0, 1, 2, 3], [2, 40, 1], min_cell=5)
    assert svg is not None
    bars = _bars(svg)
    heights = [float(b.get("height")) for b in bars]
    assert heights[0] == heights[2] == pytest.approx(heights[1] * 5 / 40)
    assert bars[0].get("stroke-dasharray") and not bars[1].get("stroke-dasharray")
    titles = [b.find(f"{SVG}title").text for b in bars]
    assert titles[0].endswith("<5") and titles[1].endswith(": 40") and titles[2].endswith("<5")


def test_histogram_without_extremes_hides_the_end_labels() -> None:
    svg = charts.histogram([17, 40, 60, 103], [100, 200, 3], min_cell=5, show_extremes=False)
    assert svg is not None
    root = ET.fromstring(svg)
    labels = [t.text for t in root.findall(f"{SVG}text")]
    titles = [t.text or "" for t in root.iter(f"{SVG}title")]
    assert labels == ["…", "…"]
    assert not any("17" in t or "103" in t for t in titles), titles
    assert "40 to 60: 200" in titles


def test_level_bars_for_iris_species_and_escaped_values() -> None:
    iris = load_iris()
    names, counts = np.unique(iris.target_names[iris.target], return_counts=True)
    levels = [{"value": str(n), "count": int(c)} for n, c in zip(names, counts, strict=True)]
    svg = charts.level_bars(levels, min_cell=5)
    bars = _bars(svg or "")
    # 50 of each species (Fisher 1936; scikit-learn's description): three bars of one width
    assert len(bars) == 3 and len({b.get("width") for b in bars}) == 1
    hostile = charts.level_bars([{"value": "<b onmouseover=x>&", "count": 9}], other=3, min_cell=5)
    root = ET.fromstring(hostile or "")
    texts = [t.text for t in root.findall(f"{SVG}text")]
    assert "<b onmouseover=x>&"[:15] in texts[0] and "(other)" in texts and "<5" in texts
    assert not root.findall(f".//{SVG}b")


def test_nothing_to_draw_is_no_chart() -> None:
    assert charts.histogram([], [], min_cell=5) is None
    assert charts.histogram([0, 1], [1, 2], min_cell=5) is None  # edges and counts disagree
    assert charts.level_bars([], min_cell=5) is None
