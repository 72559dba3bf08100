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

import contextlib
import gc
import io
import itertools
import math
from collections.abc import Iterator, Mapping, Sequence
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
    axis is labelled in the canonical value itself (Teff in K on a Kiel diagram: still
    drawn in log10, its ticks at round values).
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
LEGEND_TITLE = "flagged rows by rule"
LEGEND_FONT_PT, LEGEND_TITLE_PT = 7.5, 8.0
#: the legend's spacing in units of its font size (matplotlib's legend defaults but for
#: the handle-to-text pad and the column spacing; "border_axes_pad" insets the legend
#: from its place)
LEGEND_SPACING = {"border_pad": 0.4, "label_spacing": 0.5, "handle_length": 2.0,
                  "handle_height": 0.7, "handle_text_pad": 0.4, "column_spacing": 1.5,
                  "border_axes_pad": 0.5}
#: room for the legend's title and each of its rows when sizing the canvas before the
#: legend is measured (generous: the image is cut to the measured height afterwards)
LEGEND_ROOM_IN = (0.45, 0.2)
DPI = 100
#: zlib level of the PNG files: 3 makes them as small as the default 6, in less time
PNG_COMPRESSION = 3


def render(grid: DensityGrid, points: Mapping[str, RulePoints],
           rule_order: Sequence[str], flagged: Mapping[str, int]) -> RenderedDiagram:
    """Draw one diagram: the density of all stars, the flagged stars of each rule on top.

    ``rule_order`` fixes each rule's colour and marker shape (the run's flagged rules in
    order); ``flagged`` gives each rule's total number of flags for the legend.  Flagged
    stars beyond the axes are drawn on the frame as outlined triangles pointing outwards.

    Drawn cheaply, as this is a fixed cost of every run: everything in the binned
    coordinates (log10 Teff on both diagrams), where the cells are even, so the density is
    one image (an axis shown in linear values, Teff in K, is labelled at round values
    placed at their log10: :func:`round_ticks`); no text through mathtext (its parser
    costs a good part of a second on first use); the flagged stars as marker lines; one
    canvas for measuring and drawing, so no text is measured twice (it is taller than
    needed and the image is cut to the legend afterwards); no garbage collection while
    drawing (see :func:`_collection_paused`).
    """
    with _collection_paused():
        matplotlib = load_matplotlib()
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
        x_range = spec.x.low + spec.x.step * (x_lo + x_factor * np.array([0, shown.shape[0]]))
        y_range = spec.y.low + spec.y.step * (y_lo + y_factor * np.array([0, shown.shape[1]]))
        drawn = sorted((r for r in rule_order if r in points),
                       key=lambda r: (-points[r].plotted, rule_order.index(r)))

        with matplotlib.rc_context(_STYLE):
            canvas_height = _whole_pixels(ABOVE_FRAME_IN + FRAME_IN[2] + BELOW_FRAME_IN
                                          + LEGEND_ROOM_IN[0]
                                          + LEGEND_ROOM_IN[1] * (len(drawn) + 1))
            figure = Figure(figsize=(FIGURE_WIDTH_IN, canvas_height), dpi=DPI)
            canvas = FigureCanvasAgg(figure)
            ax = figure.add_axes((0.1, 0.3, 0.74, 0.6))
            colour_axes = figure.add_axes((0.86, 0.3, 0.025, 0.6))
            density = np.ma.masked_equal(shown.T, 0)
            if density.count():
                picture = ax.imshow(density, origin="lower", aspect="auto",
                                    interpolation="nearest", zorder=1,
                                    extent=(*x_range, *y_range),
                                    cmap=LinearSegmentedColormap.from_list(
                                        "catcheck-density", DENSITY_COLOURS),
                                    norm=LogNorm(vmin=1, vmax=max(2, int(density.max()))))
                bar = figure.colorbar(picture, cax=colour_axes)
                bar.formatter = _plain_text_labels(bar.formatter)
                bar.minorformatter = _plain_text_labels(bar.minorformatter)
                bar.set_label("stars per cell")
                _minor_ticks_as_one_line(bar)
            else:
                colour_axes.set_axis_off()
                ax.text(0.5, 0.5, f"none of the {grid.placed + grid.off_grid:,} rows with "
                        "both values\nlies inside these axes", transform=ax.transAxes,
                        ha="center", va="center", color="#5c6b78", fontsize=10)
            on_edge, by_rule = 0, {}
            for layer, rule_id in enumerate(drawn):  # the most flagged first, rarer on top
                index = rule_order.index(rule_id)
                colour, marker = rule_style(index)
                mine = points[rule_id]
                directions = edge_directions(mine.x, mine.y, x_range, y_range,
                                             spec.x.reversed, spec.y.reversed)
                x = np.clip(mine.x, x_range[0], x_range[1])
                y = np.clip(mine.y, y_range[0], y_range[1])
                area = 15.0 if len(x) < 500 else 8.0 if len(x) < 2000 else 4.0  # points^2
                inside = directions == ""
                ax.plot(x[inside], y[inside], linestyle="none", marker=marker,
                        markersize=math.sqrt(area), color=colour, alpha=0.85, markeredgewidth=0,
                        zorder=3 + layer)
                for direction, edge_marker in EDGE_MARKERS.items():
                    here = directions == direction
                    if here.any():
                        ax.plot(x[here], y[here], linestyle="none", marker=edge_marker,
                                markersize=math.sqrt(28.0), color=colour,
                                markeredgecolor=EDGE_OUTLINE, markeredgewidth=0.6,
                                zorder=3 + len(drawn) + layer, clip_on=False)
                on_edge += int((~inside).sum())
                by_rule[index] = (Line2D([], [], linestyle="none", marker=marker,
                                         color=colour, markersize=6.0, markeredgewidth=0),
                                  legend_label(rule_id, flagged.get(rule_id, mine.plotted),
                                               mine, spec))
            for axis, scale, coordinate_range in ((spec.x, ax.xaxis, x_range),
                                                  (spec.y, ax.yaxis, y_range)):
                if axis.show_linear:  # log10 on the page, labelled in values at round values
                    _label_in_values(scale, coordinate_range)
            ax.set_xlim(*(x_range[::-1] if spec.x.reversed else x_range))
            ax.set_ylim(*(y_range[::-1] if spec.y.reversed else y_range))
            ax.set_xlabel(spec.x.label)
            ax.set_ylabel(spec.y.label)
            # y given: nothing above the frame to avoid, so no search for a place
            ax.set_title(spec.title, loc="left", fontweight="bold", y=1.0)
            ax.grid(True, color="#d9dde1", linewidth=0.5, zorder=0)
            ax.set_axisbelow(True)
            entries = [by_rule[index] for index in sorted(by_rule)]
            if on_edge:
                entries.append((Line2D([], [], linestyle="none", marker=EDGE_MARKERS["right"],
                                       color="#b9c3cc", markeredgecolor=EDGE_OUTLINE,
                                       markersize=6.5, markeredgewidth=0.6),
                                "beyond the axes: on the frame, pointing outwards"))
            legend = _Legend(figure, entries) if entries else None
            height = _image_height(legend.height if legend is not None else 0.0)
            if height > canvas_height:  # more room than foreseen: a new canvas
                canvas_height = _whole_pixels(height)
                figure.set_size_inches(FIGURE_WIDTH_IN, canvas_height)
            _lay_out(figure, ax, colour_axes, legend, canvas_height)
            canvas.draw()
            png = _png(np.asarray(canvas.buffer_rgba())[:int(height * DPI)])
    return RenderedDiagram(spec, png, grid.placed + grid.off_grid,
                           grid.placed + grid.off_grid - int(shown.sum()), on_edge)


def load_matplotlib() -> Any:
    """Import the parts of matplotlib that :func:`render` draws with (not pyplot) and
    return the package.  Called before forking, the forked processes draw without
    importing; no garbage collection meanwhile (importing makes many objects)."""
    with _collection_paused():
        import matplotlib
        import matplotlib.backends.backend_agg
        import matplotlib.figure

    return matplotlib


def _png(pixels: np.ndarray) -> bytes:
    """An opaque RGBA image (rows from the top) as PNG bytes: RGB, no metadata but the
    resolution, so the same pixels give the same bytes."""
    from PIL import Image  # a dependency of matplotlib

    buffer = io.BytesIO()
    Image.fromarray(np.ascontiguousarray(pixels[:, :, :3])).save(
        buffer, format="png", dpi=(DPI, DPI), compress_level=PNG_COMPRESSION)
    return buffer.getvalue()


def _minor_ticks_as_one_line(bar: Any) -> None:
    """Draw a colour bar's minor ticks, when none is labelled (a log scale over more than a
    decade: some thirty ticks), as one line of tick marks instead of an object per tick;
    they look the same."""
    import matplotlib
    from matplotlib.lines import Line2D
    from matplotlib.markers import TICKRIGHT
    from matplotlib.ticker import NullLocator

    axis = bar.ax.yaxis
    low, high = sorted(axis.get_view_interval())
    where = axis.get_minorticklocs()
    where = where[(where >= low) & (where <= high)]
    rc = matplotlib.rcParams
    if (bar.orientation != "vertical" or rc["ytick.direction"] != "out"
            or any(bar.minorformatter.format_ticks(where))):
        return
    bar.minorlocator = NullLocator()
    bar.ax.add_artist(Line2D(np.ones(len(where)), where, linestyle="none", marker=TICKRIGHT,
                             markersize=rc["ytick.minor.size"], color=rc["ytick.color"],
                             markeredgewidth=rc["ytick.minor.width"], clip_on=False,
                             transform=bar.ax.get_yaxis_transform()))


@contextlib.contextmanager
def _collection_paused() -> Iterator[None]:
    """Garbage collection paused inside (and left as it was after): drawing makes some
    hundred thousand small objects, which set off full collections over everything the
    process holds (a tenth of a second and more per figure); the figure's own garbage is
    collected later."""
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


class _Legend:
    """The legend under the plot: per rule its marker and its label, under a title, in two
    columns when they fit the figure's width, else one.

    Laid out as matplotlib's own legend lays out these entries (the same spacing, in units
    of the font size: :data:`LEGEND_SPACING`), but measured once and drawn as plain texts
    and markers: matplotlib's legend measures and lays out its boxes again at every step,
    a good part of a figure's drawing time.  The labels are measured on the canvas they are
    drawn on, so drawing reuses the measurements.
    """

    def __init__(self, figure: Any, entries: Sequence[tuple[Any, str]]) -> None:
        from matplotlib.transforms import IdentityTransform

        self.figure = figure
        renderer = figure.canvas.get_renderer()
        pixels = figure.dpi / 72.0 * LEGEND_FONT_PT  # pixels per unit of LEGEND_SPACING
        self.space = {name: size * pixels for name, size in LEGEND_SPACING.items()}

        least_ascent: dict[float, float] = {}

        def text(label: str, size: float) -> tuple[Any, tuple[float, float, float]]:
            """A text drawn at its baseline's left end, and its (width, ascent, descent)
            as matplotlib's legend reckons them (the ascent at least that of "lp")."""
            artist = figure.text(0.0, 0.0, label, fontsize=size, ha="left", va="baseline",
                                 transform=IdentityTransform())
            box = artist.get_window_extent(renderer)
            if size not in least_ascent:
                _, height, descent = renderer.get_text_width_height_descent(
                    "lp", artist.get_fontproperties(), ismath=False)
                least_ascent[size] = height - descent
            return artist, (box.width, max(least_ascent[size], box.y1), -box.y0)

        self.title, self.title_box = text(LEGEND_TITLE, LEGEND_TITLE_PT)
        labels = [text(label, LEGEND_FONT_PT) for _, label in entries]
        self.handles = [handle for handle, _ in entries]
        self.labels = [artist for artist, _ in labels]
        self.boxes = [box for _, box in labels]
        self.columns = 2
        if self.width() > (FIGURE_WIDTH_IN - 2 * LEGEND_LEFT_IN) * figure.dpi:
            self.columns = 1

    def column_rows(self) -> list[range]:
        """The entries of each column (the first columns take one more when they do not
        share out evenly)."""
        per_column = math.ceil(len(self.boxes) / self.columns)
        return [range(first, min(first + per_column, len(self.boxes)))
                for first in range(0, len(self.boxes), per_column)]

    def entry(self, index: int) -> tuple[float, float, float]:
        """An entry's (width, ascent, descent): its handle's box beside its label."""
        width, ascent, descent = self.boxes[index]
        return (self.space["handle_length"] + self.space["handle_text_pad"] + width,
                max(self.space["handle_height"], ascent), max(0.0, descent))

    def width(self) -> float:
        """The legend's width in pixels."""
        columns = [max(self.entry(i)[0] for i in rows) for rows in self.column_rows()]
        inner = sum(columns) + self.space["column_spacing"] * (len(columns) - 1)
        return max(self.title_box[0], inner) + 2 * self.space["border_pad"]

    def baselines(self) -> list[float]:
        """Each entry's baseline, in pixels below the first entries' baseline."""
        baselines = [0.0] * len(self.boxes)
        for rows in self.column_rows():
            for previous, index in itertools.pairwise(rows):
                baselines[index] = (baselines[previous] + self.entry(previous)[2]
                                    + self.space["label_spacing"] + self.entry(index)[1])
        return baselines

    def heights(self) -> tuple[float, float]:
        """(the rows' height above the first baseline, the legend's height) in pixels."""
        columns = self.column_rows()
        above = max(self.entry(rows[0])[1] for rows in columns)
        baselines = self.baselines()
        below = max(baselines[rows[-1]] + self.entry(rows[-1])[2] for rows in columns)
        _, title_ascent, title_descent = self.title_box
        return above, (2 * self.space["border_pad"] + title_ascent + title_descent
                       + self.space["label_spacing"] + above + below)

    @property
    def height(self) -> float:
        """The legend's height in inches."""
        return self.heights()[1] / self.figure.dpi

    def place(self, left: float, top: float) -> None:
        """Put the legend's top left corner at (left, top), in pixels of the canvas (its
        top at ``top`` pixels from the bottom)."""
        from matplotlib.transforms import IdentityTransform

        pad, space = self.space["border_pad"], self.space
        _, title_ascent, title_descent = self.title_box
        self.title.set_position((left + pad, top - pad - title_ascent))
        above, _ = self.heights()
        first = top - pad - title_ascent - title_descent - space["label_spacing"] - above
        baselines = self.baselines()
        x = left + pad
        for rows in self.column_rows():
            for index in rows:
                y = first - baselines[index]
                self.handles[index].set_data([x + space["handle_length"] / 2],
                                             [y + space["handle_height"] / 2])
                self.handles[index].set_transform(IdentityTransform())
                self.figure.add_artist(self.handles[index])
                self.labels[index].set_position(
                    (x + space["handle_length"] + space["handle_text_pad"], y))
            x += max(self.entry(i)[0] for i in rows) + space["column_spacing"]


def _whole_pixels(inches: float) -> float:
    """A canvas height of at least ``inches``: whole pixels and a hundredth (so the canvas
    has the same whole number of pixels however the product with the resolution rounds,
    and what is drawn sits at the same place below its top on any canvas)."""
    return (math.ceil(inches * DPI - 1e-6) + 0.01) / DPI


def _image_height(legend_height: float) -> float:
    """The figure's height in inches: the plot, and the legend (of that height) under it."""
    return (ABOVE_FRAME_IN + FRAME_IN[2] + BELOW_FRAME_IN
            + (legend_height + 0.12 if legend_height else 0.0))


def _lay_out(figure: Any, ax: Any, colour_axes: Any, legend: _Legend | None,
             canvas_height: float) -> None:
    """Place the plot and the legend under it (in inches from the canvas's top: the image
    is its top :func:`_image_height`)."""
    frame_bottom = (canvas_height - ABOVE_FRAME_IN - FRAME_IN[2]) / canvas_height
    frame_height = FRAME_IN[2] / canvas_height
    left, width, _ = FRAME_IN
    ax.set_position((left / FIGURE_WIDTH_IN, frame_bottom, width / FIGURE_WIDTH_IN,
                     frame_height))
    colour_axes.set_position((COLOUR_BAR_IN[0] / FIGURE_WIDTH_IN, frame_bottom,
                              COLOUR_BAR_IN[1] / FIGURE_WIDTH_IN, frame_height))
    if legend is not None:
        inset = legend.space["border_axes_pad"]
        # 0.04 in under the room below the frame (the image ends 0.08 in under the legend)
        top = canvas_height - ABOVE_FRAME_IN - FRAME_IN[2] - BELOW_FRAME_IN - 0.04
        legend.place(LEGEND_LEFT_IN * figure.dpi + inset, top * figure.dpi - inset)


def round_ticks(low: float, high: float) -> list[float]:
    """Round values from ``low`` to ``high`` (> 0) for an axis on a log scale, as many as
    its span has room for: 3,000, 4,000, 5,000, 7,000, 10,000 over a short span; 3,000,
    10,000, 30,000 over several decades."""
    decades = math.log10(high / low)
    steps = ((1, 1.5, 2, 3, 4, 5, 7) if decades < 0.7 else (1, 2, 3, 5) if decades < 1.2
             else (1, 2, 5) if decades < 2 else (1, 3))
    ticks = [m * 10.0 ** e for e in range(math.floor(math.log10(low)),
                                          math.ceil(math.log10(high)) + 1) for m in steps]
    return [t for t in ticks if low <= t <= high]


def _label_in_values(scale: Any, coordinate_range: np.ndarray) -> None:
    """Label an axis drawn in log10 of a value (Teff) in the values themselves: ticks at
    round values (:func:`round_ticks`), placed at their log10."""
    from matplotlib.ticker import FixedFormatter, FixedLocator, NullLocator

    ticks = round_ticks(10.0 ** float(coordinate_range.min()),
                        10.0 ** float(coordinate_range.max()))
    scale.set_major_locator(FixedLocator(np.log10(ticks)))
    scale.set_major_formatter(FixedFormatter([f"{t:,.0f}" for t in ticks]))
    scale.set_minor_locator(NullLocator())


_SUPERSCRIPTS = str.maketrans("0123456789-", "\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076"
                              "\u2077\u2078\u2079\u207b")


def plain_text_label(label: str) -> str:
    """A tick label of matplotlib's log formatters ("$\\mathdefault{10^{3}}$",
    "$\\mathdefault{2\\times10^{0}}$") as plain text ("10\u00b3", "2\u00d710\u2070"): the same
    look in the same font, drawn without mathtext."""
    if not (label.startswith("$") and label.endswith("$")):
        return label
    text = label[1:-1].removeprefix("\\mathdefault{").removesuffix("}")
    text = text.replace("\\times", "\u00d7")
    head, caret, exponent = text.partition("^{")
    return head + exponent.removesuffix("}").translate(_SUPERSCRIPTS) if caret else head


def _plain_text_labels(formatter: Any) -> Any:
    """``formatter`` (a matplotlib tick formatter: which ticks it labels is its own
    choice) with its labels as plain text (:func:`plain_text_label`)."""
    from matplotlib.ticker import Formatter

    class PlainTextLabels(Formatter):
        def set_axis(self, axis: Any) -> None:
            super().set_axis(axis)
            formatter.set_axis(axis)

        def set_locs(self, locs: Any) -> None:
            super().set_locs(locs)
            formatter.set_locs(locs)

        def __call__(self, x: float, pos: int | None = None) -> str:
            return plain_text_label(formatter(x, pos))

    return PlainTextLabels()


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
