"""The diagrams of the visual report, an HR and a Kiel diagram of the whole catalogue.

Two layers, so a catalogue of any size is drawn in bounded memory and time:

* accumulation (numpy only): :class:`DiagramData` is an engine observer.  For every
  batch it adds the stars to a fixed fine 2-D histogram per diagram (bin indices computed
  directly, one ``np.bincount`` per batch) and offers each rule's flagged stars to a
  bounded sample (:class:`catcheck.findings.RowSample`: the rows with the smallest row
  hash, so the points drawn do not depend on batch size or file split);
* drawing (matplotlib, imported only here and only when drawing): :func:`render` crops
  the histogram to where the stars are, coarsens it to a readable cell size, draws it as
  a density image and the flagged stars on top, one colour and marker shape per rule
  (flagged stars beyond the axes are pinned to the frame as triangles pointing outwards),
  and returns PNG bytes with fixed metadata (the same run gives the same bytes).
"""

from __future__ import annotations

import io
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from catcheck.canonical import StarBatch
from catcheck.findings import RowSample
from catcheck.profile import Profile

#: flagged stars drawn per rule, at most
POINTS_PER_RULE = 5000
#: cells of the drawn density image along each axis, at most
DISPLAY_CELLS = 240
#: the axes leave out this fraction of the stars at each end (outliers would squeeze the
#: image), then add a margin; stars and flagged points beyond them are drawn on the edge
TAIL_FRACTION = 0.0005
MARGIN_FRACTION = 0.06

#: rule colours (our own palette: ten hues far apart, none grey or as dark as the density
#: image) and marker shapes (filled, no triangles: those mark points beyond the axes);
#: rule i of a run gets colour i mod 10 and shape i mod 7, so neighbours in the run differ
#: in both and the first 70 rules have distinct pairs (see :func:`rule_style`)
RULE_COLOURS = ("#d7263d", "#1b76c2", "#f2a104", "#2e9e44", "#8e44ad", "#15b2c7",
                "#c2187a", "#8a5a2b", "#97b814", "#f28cb1")
RULE_MARKERS = ("o", "s", "D", "P", "X", "p", "h")
#: flagged stars beyond the axes, pinned to the frame: triangles pointing outwards
EDGE_MARKERS = {"left": "<", "right": ">", "down": "v", "up": "^"}
EDGE_OUTLINE = "#1f2a33"
DENSITY_COLOURS = ("#eef0f2", "#b9c3cc", "#6f8294", "#34495e", "#141e28")


@dataclass(frozen=True)
class Axis:
    """One axis of a diagram: what it shows and how stars are binned along it.

    Stars are binned in ``coordinate`` (log10 of the canonical value when ``log``) on a
    fixed grid from ``low`` to ``high`` in steps of ``step``; with ``show_linear`` the
    axis is drawn in the canonical value itself (Teff in K on a Kiel diagram).
    """

    quantity: str
    label: str
    low: float
    high: float
    step: float
    log: bool = False
    reversed: bool = False
    show_linear: bool = False
    min_span: float = 0.5

    @property
    def key(self) -> str:
        """The name of the coordinate (axes binning the same coordinate share it)."""
        return f"log_{self.quantity}" if self.log else self.quantity

    @property
    def bins(self) -> int:
        return round((self.high - self.low) / self.step)

    @property
    def name(self) -> str:
        """The coordinate's name without its unit ("log L" for "log L [Lsun]")."""
        return self.label.split(" [")[0]

    def coordinate(self, stars: StarBatch) -> np.ndarray:
        """The binned coordinate of every star of a batch (NaN where not usable)."""
        return stars.log10(self.quantity) if self.log else stars.values[self.quantity]

    def shown(self, coordinate: np.ndarray) -> np.ndarray:
        """Coordinates as drawn on the axis."""
        return np.power(10.0, coordinate) if self.show_linear else coordinate


@dataclass(frozen=True)
class DiagramSpec:
    """A diagram: its file name, title and two axes."""

    name: str
    title: str
    x: Axis
    y: Axis

    @property
    def needs(self) -> tuple[str, str]:
        return self.x.quantity, self.y.quantity

    @property
    def file(self) -> str:
        return f"{self.name}.png"


_LOG_TEFF = dict(quantity="teff", low=3.0, high=5.7, step=0.005, log=True, reversed=True)
HR_DIAGRAM = DiagramSpec(
    "hr_diagram", "Hertzsprung-Russell diagram",
    Axis(label="log Teff [K]", min_span=0.3, **_LOG_TEFF),
    Axis("luminosity", "log L [Lsun]", -6.0, 8.0, 0.02, log=True, min_span=2.0))
KIEL_DIAGRAM = DiagramSpec(
    "kiel_diagram", "Kiel diagram",
    Axis(label="Teff [K]", show_linear=True, min_span=0.2, **_LOG_TEFF),
    Axis("logg", "log g [cm s-2]", -2.0, 10.0, 0.02, reversed=True, min_span=1.5))
DIAGRAMS = (HR_DIAGRAM, KIEL_DIAGRAM)


@dataclass
class DensityGrid:
    """Stars counted on one diagram's fixed grid; rows that fall off the grid are counted."""

    spec: DiagramSpec
    counts: np.ndarray = field(init=False)
    placed: int = 0
    off_grid: int = 0

    def __post_init__(self) -> None:
        self.counts = np.zeros(self.spec.x.bins * self.spec.y.bins, dtype=np.int64)

    def add(self, x: np.ndarray, y: np.ndarray) -> None:
        """Count stars at coordinates (x, y); rows where either is NaN are not stars here."""
        both = ~(np.isnan(x) | np.isnan(y))
        x, y = x[both], y[both]
        nx, ny = self.spec.x.bins, self.spec.y.bins
        with np.errstate(invalid="ignore"):
            ix = np.floor((x - self.spec.x.low) / self.spec.x.step)
            iy = np.floor((y - self.spec.y.low) / self.spec.y.step)
        inside = (ix >= 0) & (ix < nx) & (iy >= 0) & (iy < ny)
        cells = ix[inside].astype(np.int64) * ny + iy[inside].astype(np.int64)
        self.counts += np.bincount(cells, minlength=nx * ny)
        self.placed += int(inside.sum())
        self.off_grid += int((~inside).sum())

    def merge(self, other: DensityGrid) -> None:
        """Add another grid's counts (same diagram)."""
        self.counts += other.counts
        self.placed += other.placed
        self.off_grid += other.off_grid

    def image(self) -> np.ndarray:
        """Counts as an (x bins, y bins) array."""
        return self.counts.reshape(self.spec.x.bins, self.spec.y.bins)


class DiagramData:
    """Everything the diagrams need from a run, gathered batch by batch (an engine observer).

    Only the diagrams whose two quantities the profile maps are kept.
    """

    def __init__(self, profile: Profile, points_per_rule: int = POINTS_PER_RULE) -> None:
        self.specs = [s for s in DIAGRAMS if all(profile.provides(q) for q in s.needs)]
        self.grids = {spec.name: DensityGrid(spec) for spec in self.specs}
        self.points_per_rule = points_per_rule
        self.points: dict[str, RowSample] = {}

    def observe(self, stars: StarBatch, flags: pa.Table | None) -> None:
        """Add one checked batch and its flags."""
        coordinates = {}
        for spec in self.specs:
            for axis in (spec.x, spec.y):
                coordinates[axis] = axis.coordinate(stars)
            self.grids[spec.name].add(coordinates[spec.x], coordinates[spec.y])
        if flags is None or not flags.num_rows or not self.specs:
            return
        encoded = pc.dictionary_encode(flags["rule"].combine_chunks())
        codes = encoded.indices.to_numpy()
        rows = flags["row"].to_numpy()
        for code, rule_id in enumerate(encoded.dictionary.to_pylist()):
            mine = rows[codes == code]
            positions = mine - stars.first_row
            sample = self.points.setdefault(rule_id, RowSample(self.points_per_rule))
            sample.add(mine, **{axis.key: values[positions]
                                for axis, values in coordinates.items()})

    def merge(self, other: DiagramData) -> None:
        """Take in what another copy gathered (from a worker process)."""
        for name, grid in self.grids.items():
            grid.merge(other.grids[name])
        for rule_id, sample in other.points.items():
            self.points.setdefault(rule_id, RowSample(self.points_per_rule)).merge(sample)

    def flagged_points(self, spec: DiagramSpec) -> dict[str, RulePoints]:
        """Per rule, its sampled flagged stars on a diagram: the coordinates of those that
        have both, and how many of the sample lack one."""
        points = {}
        for rule_id, sample in self.points.items():
            columns = sample.columns()
            x, y = columns[spec.x.key], columns[spec.y.key]
            no_x, no_y = np.isnan(x), np.isnan(y)
            both = ~(no_x | no_y)
            points[rule_id] = RulePoints(x[both], y[both], sampled=len(x),
                                         without_x=int(no_x.sum()), without_y=int(no_y.sum()))
        return points


@dataclass(frozen=True)
class RulePoints:
    """One rule's sampled flagged stars on one diagram.

    ``x`` and ``y`` hold the stars with both coordinates; ``sampled`` counts the whole
    sample (at most :data:`POINTS_PER_RULE`), ``without_x`` and ``without_y`` the stars of
    the sample that lack each coordinate (a star may lack both).
    """

    x: np.ndarray
    y: np.ndarray
    sampled: int
    without_x: int = 0
    without_y: int = 0

    @property
    def plotted(self) -> int:
        return len(self.x)


def legend_label(rule_id: str, flagged: int, points: RulePoints, spec: DiagramSpec) -> str:
    """A rule's legend entry: its flags, and why any are not on the diagram.

    "teff-range (45)" when every flagged row is drawn; "teff-range (44 of 45 plotted;
    1 without log L)" when a row lacks a coordinate; "... plotted: a sample of 5,000,
    3 of them without log L" when there were more flags than the sample holds.
    """
    if points.plotted == flagged:
        return f"{rule_id} ({flagged:,})"
    missing = points.sampled - points.plotted
    what = (spec.x.name if not points.without_y else spec.y.name if not points.without_x
            else f"{spec.x.name} or {spec.y.name}")
    text = f"{rule_id} ({points.plotted:,} of {flagged:,} plotted"
    if points.sampled < flagged:
        text += f": a sample of {points.sampled:,}"
        return text + (f", {missing:,} of them without {what})" if missing else ")")
    return text + (f"; {missing:,} without {what})" if missing else ")")


def rule_style(index: int) -> tuple[str, str]:
    """The colour and marker shape of the run's ``index``-th flagged rule."""
    return RULE_COLOURS[index % len(RULE_COLOURS)], RULE_MARKERS[index % len(RULE_MARKERS)]


def edge_directions(x: np.ndarray, y: np.ndarray, x_range: Sequence[float],
                    y_range: Sequence[float], x_reversed: bool = False,
                    y_reversed: bool = False) -> np.ndarray:
    """Where each point beyond the axes lies as seen on the page: "left", "right", "up" or
    "down" ("" for a point inside).

    A point beyond both axes (a corner) points up or down.  ``*_range`` are the drawn
    (low, high) values; a reversed axis draws high values on the left (or at the bottom).
    """
    def side(values: np.ndarray, bounds: Sequence[float], flipped: bool) -> np.ndarray:
        beyond = np.where(values < min(bounds), -1, np.where(values > max(bounds), 1, 0))
        return -beyond if flipped else beyond

    across, upward = side(np.asarray(x), x_range, x_reversed), side(np.asarray(y), y_range,
                                                                     y_reversed)
    return np.select([upward > 0, upward < 0, across < 0, across > 0],
                     ["up", "down", "left", "right"], default="")


@dataclass(frozen=True)
class RenderedDiagram:
    """A drawn diagram: PNG bytes and what its caption needs to say."""

    spec: DiagramSpec
    png: bytes
    stars: int
    beyond_axes: int
    points_on_edge: int

    @property
    def size(self) -> tuple[int, int]:
        """(width, height) of the image in pixels, from the PNG header."""
        return (int.from_bytes(self.png[16:20], "big"), int.from_bytes(self.png[20:24], "big"))


def _window(counts: np.ndarray, axis: Axis) -> tuple[int, int]:
    """The bin range [lo, hi) to draw along one axis from its marginal counts."""
    total = counts.sum()
    if not total:
        return 0, axis.bins
    cumulative = np.cumsum(counts)
    lo = int(np.searchsorted(cumulative, TAIL_FRACTION * total, side="right"))
    hi = int(np.searchsorted(cumulative, (1 - TAIL_FRACTION) * total, side="left")) + 1
    span = max(hi - lo, math.ceil(axis.min_span / axis.step))
    centre = (lo + hi) / 2
    margin = MARGIN_FRACTION * span
    return (max(0, math.floor(centre - span / 2 - margin)),
            min(axis.bins, math.ceil(centre + span / 2 + margin)))


def _coarsen(image: np.ndarray, x_factor: int, y_factor: int) -> np.ndarray:
    """Sums over blocks of x_factor x y_factor cells (a partial block at the end is left
    out)."""
    nx, ny = image.shape
    return image[:nx - nx % x_factor, :ny - ny % y_factor].reshape(
        nx // x_factor, x_factor, ny // y_factor, y_factor).sum(axis=(1, 3))


#: the figure's layout in inches: its width, the plot's frame, the room above it and below
#: it (ticks and axis label); the legend goes under that and the figure grows to hold it
FIGURE_WIDTH_IN = 7.0
FRAME_IN = (0.7, 5.18, 3.6)  # left, width, height
ABOVE_FRAME_IN = 0.45
BELOW_FRAME_IN = 0.62
COLOUR_BAR_IN = (6.02, 0.175)  # left, width
LEGEND_LEFT_IN = 0.1
DPI = 100


def render(grid: DensityGrid, points: Mapping[str, RulePoints],
           rule_order: Sequence[str], flagged: Mapping[str, int]) -> RenderedDiagram:
    """Draw one diagram: the density of all stars, the flagged stars of each rule on top.

    ``rule_order`` fixes each rule's colour and marker shape (the run's flagged rules in
    order); ``flagged`` gives each rule's total number of flags for the legend.  Flagged
    stars beyond the axes are drawn on the frame as outlined triangles pointing outwards.
    """
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.colors import LinearSegmentedColormap, LogNorm
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    spec = grid.spec
    image = grid.image()
    x_lo, x_hi = _window(image.sum(axis=1), spec.x)
    y_lo, y_hi = _window(image.sum(axis=0), spec.y)
    x_factor = max(1, math.ceil((x_hi - x_lo) / DISPLAY_CELLS))
    y_factor = max(1, math.ceil((y_hi - y_lo) / DISPLAY_CELLS))
    shown = _coarsen(image[x_lo:x_hi, y_lo:y_hi], x_factor, y_factor)
    x_edges = spec.x.low + spec.x.step * (x_lo + x_factor * np.arange(shown.shape[0] + 1))
    y_edges = spec.y.low + spec.y.step * (y_lo + y_factor * np.arange(shown.shape[1] + 1))
    x_range = spec.x.shown(np.array([x_edges[0], x_edges[-1]]))
    y_range = spec.y.shown(np.array([y_edges[0], y_edges[-1]]))

    with matplotlib.rc_context(_STYLE):
        figure = Figure(figsize=(FIGURE_WIDTH_IN, 6.0), dpi=DPI)
        FigureCanvasAgg(figure)  # a renderer, to measure the legend
        ax = figure.add_axes((0.1, 0.3, 0.74, 0.6))
        colour_axes = figure.add_axes((0.86, 0.3, 0.025, 0.6))
        density = np.ma.masked_equal(shown.T, 0)
        if density.count():
            mesh = ax.pcolormesh(spec.x.shown(x_edges), spec.y.shown(y_edges), density,
                                 cmap=LinearSegmentedColormap.from_list(
                                     "catcheck-density", DENSITY_COLOURS),
                                 norm=LogNorm(vmin=1, vmax=max(2, int(density.max()))),
                                 shading="flat", rasterized=True)
            bar = figure.colorbar(mesh, cax=colour_axes)
            bar.set_label("stars per cell")
        else:
            colour_axes.set_axis_off()
            ax.text(0.5, 0.5, f"none of the {grid.placed + grid.off_grid:,} rows with both "
                    "values\nlies inside these axes", transform=ax.transAxes, ha="center",
                    va="center", color="#5c6b78", fontsize=10)
        on_edge, legend = 0, {}
        drawn = sorted((r for r in rule_order if r in points),
                       key=lambda r: (-points[r].plotted, rule_order.index(r)))
        for layer, rule_id in enumerate(drawn):  # the most flagged first, rarer ones on top
            index = rule_order.index(rule_id)
            colour, marker = rule_style(index)
            mine = points[rule_id]
            x, y = spec.x.shown(mine.x), spec.y.shown(mine.y)
            directions = edge_directions(x, y, x_range, y_range, spec.x.reversed,
                                         spec.y.reversed)
            x = np.clip(x, x_range.min(), x_range.max())
            y = np.clip(y, y_range.min(), y_range.max())
            size = 15.0 if len(x) < 500 else 8.0 if len(x) < 2000 else 4.0
            inside = directions == ""
            ax.scatter(x[inside], y[inside], s=size, marker=marker, color=colour,
                       alpha=0.85, linewidths=0, zorder=3 + layer)
            for direction, edge_marker in EDGE_MARKERS.items():
                here = directions == direction
                if here.any():
                    ax.scatter(x[here], y[here], s=28.0, marker=edge_marker, color=colour,
                               edgecolors=EDGE_OUTLINE, linewidths=0.6,
                               zorder=3 + len(drawn) + layer, clip_on=False)
            on_edge += int((~inside).sum())
            legend[index] = (Line2D([], [], linestyle="none", marker=marker, color=colour,
                                    markersize=6.0, markeredgewidth=0),
                             legend_label(rule_id, flagged.get(rule_id, mine.plotted), mine,
                                          spec))
        for axis, scale, shown_range in ((spec.x, ax.xaxis, x_range),
                                         (spec.y, ax.yaxis, y_range)):
            if axis.show_linear:  # the values on a log scale: even cells, readable ticks
                _log_scale_in_values(ax, scale, shown_range)
        ax.set_xlim(*(x_range[::-1] if spec.x.reversed else x_range))
        ax.set_ylim(*(y_range[::-1] if spec.y.reversed else y_range))
        ax.set_xlabel(spec.x.label)
        ax.set_ylabel(spec.y.label)
        ax.set_title(spec.title, loc="left", fontweight="bold")
        ax.grid(True, color="#d9dde1", linewidth=0.5, zorder=0)
        ax.set_axisbelow(True)
        entries = [legend[index] for index in sorted(legend)]
        if on_edge:
            entries.append((Line2D([], [], linestyle="none", marker=EDGE_MARKERS["right"],
                                   color="#b9c3cc", markeredgecolor=EDGE_OUTLINE,
                                   markersize=6.5, markeredgewidth=0.6),
                            "beyond the axes: on the frame, pointing outwards"))
        legend_height = _legend(figure, entries)
        _lay_out(figure, ax, colour_axes, legend_height)
        buffer = io.BytesIO()
        figure.savefig(buffer, format="png", dpi=DPI, metadata={"Software": None})
    return RenderedDiagram(spec, buffer.getvalue(), grid.placed + grid.off_grid,
                           grid.placed + grid.off_grid - int(shown.sum()), on_edge)


def _legend(figure: Any, entries: Sequence[tuple[Any, str]]) -> float:
    """Put the legend of ``entries`` (handle, label) under the plot, in two columns when
    they fit the figure's width, else one; returns its height in inches (0 without one)."""
    if not entries:
        return 0.0

    def place(columns: int) -> Any:
        return figure.legend([handle for handle, _ in entries],
                             [label for _, label in entries], loc="upper left",
                             ncol=columns, frameon=False, title="flagged rows by rule",
                             title_fontsize=8, fontsize=7.5, alignment="left",
                             handletextpad=0.4, columnspacing=1.5)

    renderer = figure.canvas.get_renderer()
    legend = place(2)
    box = legend.get_window_extent(renderer)
    if box.width > (FIGURE_WIDTH_IN - 2 * LEGEND_LEFT_IN) * figure.dpi:
        legend.remove()
        box = place(1).get_window_extent(renderer)
    return box.height / figure.dpi


def _lay_out(figure: Any, ax: Any, colour_axes: Any, legend_height: float) -> None:
    """Size the figure to the plot and the legend under it; place both (in inches)."""
    below = BELOW_FRAME_IN + (legend_height + 0.12 if legend_height else 0.0)
    height = ABOVE_FRAME_IN + FRAME_IN[2] + below
    figure.set_size_inches(FIGURE_WIDTH_IN, height)
    left, width, frame_height = FRAME_IN
    ax.set_position((left / FIGURE_WIDTH_IN, below / height, width / FIGURE_WIDTH_IN,
                     frame_height / height))
    colour_axes.set_position((COLOUR_BAR_IN[0] / FIGURE_WIDTH_IN, below / height,
                              COLOUR_BAR_IN[1] / FIGURE_WIDTH_IN, frame_height / height))
    for legend in figure.legends:
        legend.set_bbox_to_anchor((LEGEND_LEFT_IN / FIGURE_WIDTH_IN,
                                   (legend_height + 0.08) / height),
                                  transform=figure.transFigure)


def _log_scale_in_values(ax: Any, scale: Any, shown_range: np.ndarray) -> None:
    """Draw an axis on a log scale with ticks at round values (Teff in K), as many as the
    shown range has room for."""
    from matplotlib.ticker import FixedLocator, NullLocator, StrMethodFormatter

    (ax.set_xscale if scale is ax.xaxis else ax.set_yscale)("log")
    low, high = float(shown_range.min()), float(shown_range.max())
    decades = math.log10(high / low)
    steps = ((1, 1.5, 2, 3, 4, 5, 7) if decades < 0.7 else (1, 2, 3, 5) if decades < 1.2
             else (1, 2, 5) if decades < 2 else (1, 3))
    ticks = [m * 10.0 ** e for e in range(math.floor(math.log10(low)),
                                          math.ceil(math.log10(high)) + 1) for m in steps]
    scale.set_major_locator(FixedLocator([t for t in ticks if low <= t <= high]))
    scale.set_major_formatter(StrMethodFormatter("{x:,.0f}"))
    scale.set_minor_locator(NullLocator())


_STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": 9,
    "axes.edgecolor": "#5c6b78",
    "axes.labelcolor": "#1f2a33",
    "axes.linewidth": 0.8,
    "xtick.color": "#1f2a33",
    "ytick.color": "#1f2a33",
    "figure.facecolor": "white",
    "savefig.facecolor": "white",
    "path.simplify": True,
}
