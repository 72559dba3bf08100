"""The visual report: report.html with its HR and Kiel diagrams, self-contained and atomic.

The screenshot test opens the page in headless Chromium (Debian package ``chromium``;
.ci/run installs it) and is skipped where Chromium is absent.
"""

from __future__ import annotations

import base64
import gc
import io
import itertools
import json
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from factory import sun_like, write_catalogue

import catcheck
from catcheck import html_report
from catcheck.demo import write_demo
from catcheck.diagrams import (
    EDGE_MARKERS,
    HR_DIAGRAM,
    KIEL_DIAGRAM,
    RULE_MARKERS,
    DensityGrid,
    RulePoints,
    _window,
    edge_directions,
    legend_label,
    plain_text_label,
    render,
    round_ticks,
    rule_style,
)

pytest.importorskip("matplotlib")

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> tuple[Path, Path]:
    """A small demo catalogue checked once with the default packs; the report directory."""
    root = tmp_path_factory.mktemp("demo")
    files = write_demo(root, rows=4000, seed=5)
    out = root / "report"
    catcheck.check(files.catalogue, files.profile, out=out)
    return root, out


def test_report_html_is_self_contained_with_both_figures_and_the_rule_table(demo) -> None:
    _, out = demo
    page = (out / "report.html").read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>")
    # nothing fetched from elsewhere: every src is inline data, no link to a stylesheet
    sources = re.findall(r'\b(?:src|href)\s*=\s*"([^"]*)"', page)
    assert sources and all(s.startswith("data:image/png;base64,") for s in sources)
    assert "http://" not in page and "https://" not in page and "<link" not in page
    assert "@import" not in page and "url(" not in page
    # both figures, embedded and beside the page, byte for byte
    for spec in (HR_DIAGRAM, KIEL_DIAGRAM):
        png = (out / spec.file).read_bytes()
        assert png.startswith(PNG_SIGNATURE)
        assert base64.b64encode(png).decode("ascii") in page
        assert f'alt="{spec.title}"' in page
    # the per-rule table: every rule of the run with its counts
    summary = json.loads((out / "summary.json").read_text())
    table = page[page.index('<table class="rules">'):]
    for rule in summary["rules"]:
        assert f"<code>{rule['id']}</code>" in table
    flagged = max(summary["rules"], key=lambda r: r["flagged"])
    assert f'{flagged["flagged"]:,}' in table
    assert "Worst flags by rule" in page
    assert summary["visual_report"] == {"file": "report.html",
                                        "figures": ["hr_diagram.png", "kiel_diagram.png"]}


def test_worst_examples_carry_the_largest_deviations(demo) -> None:
    _, out = demo
    import pandas as pd

    flags = pd.read_parquet(out / "flags.parquet")
    page = (out / "report.html").read_text(encoding="utf-8")
    sb = flags[flags["rule"] == "stefan-boltzmann"].sort_values(
        ["deviation", "row"], ascending=[False, True])
    worst = sb.iloc[0]
    section = page[page.index("Worst flags by rule"):]
    assert f"{worst['deviation']:.1f}&sigma;" in section
    assert html_report._e(worst["message"]) in section


def test_same_run_same_bytes(demo, tmp_path) -> None:
    root, out = demo
    again = tmp_path / "again"
    catcheck.check(root / "catalogue.parquet", root / "profile.toml", out=again,
                   batch_rows=1500)  # other batches: the sampled points must not change
    for name in ("report.html", "hr_diagram.png", "kiel_diagram.png"):
        assert (again / name).read_bytes() == (out / name).read_bytes(), name


def test_worker_processes_draw_the_same_page(tmp_path) -> None:
    """Diagrams gathered in forked workers, piece by piece, merge to the same figures."""
    files = write_demo(tmp_path, rows=4000, seed=5, chunk_rows=900)  # 5 row groups
    one, two = tmp_path / "one", tmp_path / "two"
    catcheck.check(files.catalogue, files.profile, out=one, batch_rows=1000)
    catcheck.check(files.catalogue, files.profile, out=two, batch_rows=1000, workers=2)
    for name in ("hr_diagram.png", "kiel_diagram.png"):
        assert (one / name).read_bytes() == (two / name).read_bytes(), name


def test_without_matplotlib_the_run_notes_why_and_leaves_no_old_page(demo, tmp_path,
                                                                   monkeypatch) -> None:
    root, out = demo
    target = tmp_path / "report"
    shutil.copytree(out, target)  # an older run's page and figures are there
    monkeypatch.setattr(html_report, "plotting_available", lambda: False)
    result = catcheck.check(root / "catalogue.parquet", root / "profile.toml", out=target)
    assert result.summary["visual_report"] == {"file": None,
                                               "note": html_report.NO_MATPLOTLIB}
    assert not (target / "report.html").exists() and not (target / "hr_diagram.png").exists()
    assert (target / "report.md").exists()


def test_a_profile_without_log_g_draws_the_hr_diagram_only(tmp_path) -> None:
    path = write_catalogue(tmp_path, sun_like(500))
    result = catcheck.check(path, tmp_path / "profile.toml", out=tmp_path / "out")
    assert result.summary["visual_report"]["figures"] == ["hr_diagram.png"]
    assert "no Kiel diagram" in result.summary["visual_report"]["note"]
    page = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert "no Kiel diagram: the profile maps no Teff or no log g" in page
    assert not (tmp_path / "out" / "kiel_diagram.png").exists()


def test_page_says_which_rules_did_not_run_and_splits_skipped_rows(demo) -> None:
    _, out = demo
    page = (out / "report.html").read_text(encoding="utf-8")
    summary = json.loads((out / "summary.json").read_text())
    idle = [r for r in summary["rules"] if r["status"] != "ran"]
    header = page[page.index("<header"):page.index("</header>")]
    assert f"{len(idle)} of {len(summary['rules'])} rules not run: missing " in header
    assert "<th>skipped: missing value</th><th>skipped: not applicable</th>" in page
    assert "flags (one per row and rule that failed)" in page
    # the figures' size on the page is the PNGs' own (the legend sets their height)
    for spec in (HR_DIAGRAM, KIEL_DIAGRAM):
        png = (out / spec.file).read_bytes()
        width, height = int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")
        assert f'alt="{spec.title}" width="{width}" height="{height}"' in page


def test_legend_says_why_flags_are_not_plotted() -> None:
    xs, ys = np.array([3.7, 3.8]), np.array([0.0, 1.0])
    every = RulePoints(xs, ys, sampled=2)
    assert legend_label("teff-range", 2, every, HR_DIAGRAM) == "teff-range (2)"
    lacking_l = RulePoints(xs, ys, sampled=3, without_y=1)
    assert legend_label("teff-range", 3, lacking_l, HR_DIAGRAM) == (
        "teff-range (2 of 3 plotted; 1 without log L)")
    lacking_both = RulePoints(xs, ys, sampled=4, without_x=1, without_y=2)
    assert legend_label("r", 4, lacking_both, KIEL_DIAGRAM) == (
        "r (2 of 4 plotted; 2 without Teff or log g)")
    sampled = RulePoints(xs, ys, sampled=3, without_x=1)
    assert legend_label("r", 9000, sampled, HR_DIAGRAM) == (
        "r (2 of 9,000 plotted: a sample of 3, 1 of them without log Teff)")
    assert legend_label("r", 9000, every, HR_DIAGRAM) == "r (2 of 9,000 plotted: a sample of 2)"


def test_points_beyond_the_axes_point_outwards_as_drawn() -> None:
    x = np.array([3.8, 3.0, 5.0, 3.8, 3.8, 5.0])
    y = np.array([0.0, 0.0, 0.0, -9.0, 9.0, 9.0])
    # log Teff is drawn reversed: a hotter star beyond the axes lies to the left
    assert edge_directions(x, y, (3.5, 4.5), (-2.0, 4.0), x_reversed=True).tolist() == [
        "", "right", "left", "down", "up", "up"]
    # log g grows downwards on a Kiel diagram: a too-high log g lies below the frame
    assert edge_directions(x[3:5], y[3:5], (3.5, 4.5), (-2.0, 4.0),
                           y_reversed=True).tolist() == ["up", "down"]


def test_rule_styles_tell_twenty_rules_apart() -> None:
    styles = [rule_style(i) for i in range(20)]
    assert len(set(styles)) == 20
    for (colour, marker), (next_colour, next_marker) in itertools.pairwise(styles):
        assert colour != next_colour and marker != next_marker
    assert not set(RULE_MARKERS) & set(EDGE_MARKERS.values())  # triangles mean "beyond"
    # the page's rule tables show each rule's colour and shape as in the diagrams
    assert set(RULE_MARKERS) <= set(html_report._MARKER_SHAPES)
    colour, marker = rule_style(12)
    assert html_report._swatch(12).count(colour) == 1
    assert html_report._MARKER_SHAPES[marker] in html_report._swatch(12)


def test_render_pins_points_beyond_the_axes_to_the_frame() -> None:
    grid = DensityGrid(HR_DIAGRAM)
    rng = np.random.default_rng(2)
    grid.add(rng.uniform(3.6, 3.9, 2000), rng.uniform(-1.0, 1.0, 2000))
    points = {"inside": RulePoints(np.array([3.7]), np.array([0.0]), sampled=2, without_y=1),
              "beyond": RulePoints(np.array([3.7, 5.5]), np.array([7.0, 0.0]), sampled=2)}
    drawn = render(grid, points, ["inside", "beyond"], {"inside": 2, "beyond": 2})
    assert drawn.points_on_edge == 2
    assert drawn.png.startswith(PNG_SIGNATURE) and drawn.size[0] == 700
    assert render(grid, points, ["inside", "beyond"], {"inside": 2, "beyond": 2}).png == (
        drawn.png)  # deterministic


def test_every_marker_shape_shows_at_the_smallest_size() -> None:
    """Rules with thousands of flagged stars get the smallest markers; each shape must still
    show (matplotlib's scatter drew nothing at all for the filled plus at that size)."""
    from PIL import Image

    rng = np.random.default_rng(3)
    grid = DensityGrid(HR_DIAGRAM)
    grid.add(rng.uniform(3.45, 4.25, 3000), rng.uniform(-1.5, 1.5, 3000))
    rules = [f"rule-{i}" for i in range(len(RULE_MARKERS))]
    points = {rule: RulePoints(rng.uniform(3.5 + 0.1 * i, 3.55 + 0.1 * i, 2500),
                               rng.uniform(-1.0, 1.0, 2500), sampled=2500)
              for i, rule in enumerate(rules)}
    drawn = render(grid, points, rules, dict.fromkeys(rules, 2500))
    pixels = np.asarray(Image.open(io.BytesIO(drawn.png)).convert("RGB")).astype(int)
    for index in range(len(rules)):
        colour, marker = rule_style(index)
        rgb = np.array([int(colour[k:k + 2], 16) for k in (1, 3, 5)])
        near = int((np.abs(pixels - rgb).max(axis=2) < 40).sum())
        assert near > 1000, (marker, near)  # the legend's marker alone is some 50 pixels


def test_render_sets_no_text_through_mathtext(monkeypatch) -> None:
    """Its parser costs a good part of a second on first use: tick labels (the colour bar's
    powers of ten too, on a wide or a narrow range of counts) are plain text."""
    from matplotlib.mathtext import MathTextParser

    def refuse(*args, **kwargs):
        raise AssertionError("a text went through mathtext")

    monkeypatch.setattr(MathTextParser, "parse", refuse)
    rng = np.random.default_rng(4)
    for stars in (20_000, 40):  # counts per cell up to hundreds; up to a few
        grid = DensityGrid(KIEL_DIAGRAM)
        grid.add(rng.normal(3.8, 0.05, stars), rng.normal(4.3, 0.2, stars))
        drawn = render(grid, {}, [], {})
        assert drawn.png.startswith(PNG_SIGNATURE)


def test_render_leaves_garbage_collection_as_it_was() -> None:
    grid = DensityGrid(HR_DIAGRAM)
    grid.add(np.array([3.7, 3.8]), np.array([0.0, 1.0]))
    assert gc.isenabled()
    render(grid, {}, [], {})
    assert gc.isenabled()
    gc.disable()
    try:
        render(grid, {}, [], {})
        assert not gc.isenabled()
    finally:
        gc.enable()


def test_legend_takes_two_columns_when_they_fit() -> None:
    grid = DensityGrid(HR_DIAGRAM)
    grid.add(np.array([3.7, 3.8]), np.array([0.0, 1.0]))
    rules = [f"rule-{i}-whose-name-takes-half-the-width-of-the-figure" for i in range(4)]
    points = {rule: RulePoints(np.array([3.75]), np.array([0.5]), sampled=1) for rule in rules}
    plot_only = render(grid, {}, [], {})
    long = render(grid, points, rules, dict.fromkeys(rules, 9000))  # "... (1 of 9,000 ...)"
    rules = [f"r{i}" for i in range(4)]
    points = {rule: RulePoints(np.array([3.75]), np.array([0.5]), sampled=1) for rule in rules}
    short = render(grid, points, rules, dict.fromkeys(rules, 1))  # "r1 (1)"
    row = 15  # pixels per legend row, about (7.5 pt text and spacing at 100 dpi)
    assert short.size[1] - plot_only.size[1] == pytest.approx(
        long.size[1] - plot_only.size[1] - 2 * row, abs=3)  # two rows of two, not four


def test_colour_bar_labels_and_round_teff_ticks_are_plain_text() -> None:
    assert plain_text_label(r"$\mathdefault{10^{3}}$") == "10\u00b3"
    assert plain_text_label(r"$\mathdefault{10^{-1}}$") == "10\u207b\u00b9"
    assert plain_text_label(r"$\mathdefault{2\times10^{0}}$") == "2\u00d710\u2070"
    assert plain_text_label(r"$\mathdefault{1}$") == "1"
    assert plain_text_label("") == "" and plain_text_label("5,000") == "5,000"
    # more round values on a short span, fewer per decade on a long one
    assert round_ticks(4000, 7000) == [4000, 5000, 7000]
    assert round_ticks(3300, 45000) == [5000, 10000, 20000, 30000]
    assert round_ticks(2000, 200_000) == [3000, 10000, 30000, 100_000]


def test_density_grid_counts_every_star_once() -> None:
    grid = DensityGrid(HR_DIAGRAM)
    rng = np.random.default_rng(1)
    x, y = rng.uniform(3.4, 4.4, 10_000), rng.uniform(-2, 4, 10_000)
    x[:5] = 9.0  # off the grid
    y[5:8] = np.nan  # not a star of this diagram
    grid.add(x[:6000], y[:6000])
    grid.add(x[6000:], y[6000:])
    assert grid.counts.sum() == grid.placed == 10_000 - 8
    assert grid.off_grid == 5
    reference, _, _ = np.histogram2d(
        x[8:], y[8:], bins=[HR_DIAGRAM.x.bins, HR_DIAGRAM.y.bins],
        range=[[HR_DIAGRAM.x.low, HR_DIAGRAM.x.high], [HR_DIAGRAM.y.low, HR_DIAGRAM.y.high]])
    assert np.array_equal(grid.image(), reference.astype(np.int64))


def test_axis_window_covers_the_stars_not_the_outliers() -> None:
    counts = np.zeros(HR_DIAGRAM.y.bins, dtype=np.int64)
    counts[300:400] = 1000  # log L -0.0 .. 2.0
    counts[0] = 1  # one outlier at log L -6
    lo, hi = _window(counts, HR_DIAGRAM.y)
    assert lo < 300 and hi > 400 and lo > 100


@pytest.mark.skipif(shutil.which("chromium") is None,
                    reason="Chromium is not installed (Debian package chromium)")
def test_page_renders_in_headless_chromium(demo, tmp_path) -> None:
    _, out = demo
    shot = tmp_path / "page.png"
    done = subprocess.run(
        ["chromium", "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
         "--window-size=1400,1800", f"--screenshot={shot}",
         (out / "report.html").resolve().as_uri()],
        capture_output=True, timeout=120, check=False)
    assert done.returncode == 0, done.stderr.decode(errors="replace")[-2000:]
    png = shot.read_bytes()
    assert png.startswith(PNG_SIGNATURE)
    # a blank page compresses to a few kB; the rendered report with its figures does not
    assert len(png) > 100_000
