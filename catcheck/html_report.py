"""The visual report: ``report.html``, one self-contained page, and its figures as PNG files.

Written with the ``plot`` extra (matplotlib) into the report directory beside report.md;
without matplotlib the run still succeeds and summary.json says why there is no page.
The page holds the verdict (with the rules that did not run), the catalogue-level
findings, an HR and a Kiel diagram (the whole catalogue as a density image, the flagged
rows on top by rule, each rule in its own colour and marker shape: see
:mod:`catcheck.diagrams`), the per-rule counts and each rule's worst flags with their
messages.  Figures are embedded as base64 PNG data, styles are inline, nothing is fetched
from elsewhere: the file can be mailed or archived on its own.  The same run gives the
same bytes.
"""

from __future__ import annotations

import base64
import functools
import html
import importlib.util
import math
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

from catcheck.concurrency import ForkedCall
from catcheck.diagrams import (
    HR_DIAGRAM,
    KIEL_DIAGRAM,
    POINTS_PER_RULE,
    DiagramData,
    DiagramSpec,
    RenderedDiagram,
    load_matplotlib,
    render,
    rule_style,
)
from catcheck.findings import FlagStatistics
from catcheck.profile import Profile
from catcheck.report import (
    CAUTION,
    FLAGS_MEANING,
    NOT_RUN_NEVER_FAILS,
    ROWS_MEANING,
    flag_total,
    not_run_line,
    row_total,
    skipped_counts,
)

if TYPE_CHECKING:
    from catcheck.engine import BatchObserver
    from catcheck.outputs import ReportDirectory

PAGE = "report.html"
NO_MATPLOTLIB = ("not written: matplotlib is not installed (install the plot extra: "
                 "pip install 'catcheck[plot]')")


def plotting_available() -> bool:
    """True when matplotlib can be imported (it is imported only when drawing)."""
    return importlib.util.find_spec("matplotlib") is not None


class VisualReport:
    """The visual report of one run: its observer during the run, its files afterwards.

    The diagrams are gathered from the batches as the engine checks them, which the
    local engine allows; with ``observing`` False (another engine) the page has no
    diagrams and says so.
    """

    def __init__(self, profile: Profile, observing: bool = True) -> None:
        self.enabled = plotting_available()
        self.data = DiagramData(profile) if self.enabled and observing else None

    @property
    def observers(self) -> list[BatchObserver]:
        """What the engine must call for every batch (nothing without matplotlib)."""
        return [self.data] if self.data is not None else []

    def note(self) -> dict[str, Any]:
        """The summary.json entry: the page and figures written, or why there are none."""
        if not self.enabled:
            return {"file": None, "note": NO_MATPLOTLIB}
        entry: dict[str, Any] = {"file": PAGE, "figures": [spec.file for spec in self.specs]}
        missing = self.missing_diagrams()
        if missing:
            entry["note"] = missing
        return entry

    @property
    def specs(self) -> list[DiagramSpec]:
        """The diagrams drawn."""
        return self.data.specs if self.data is not None else []

    def missing_diagrams(self) -> str:
        """Why a diagram is not drawn (empty when both are)."""
        if self.data is None:
            return "no diagrams: they are drawn by the local engine only"
        drawn = {spec.name for spec in self.specs}
        missing = []
        if HR_DIAGRAM.name not in drawn:
            missing.append("no HR diagram: the profile maps no Teff or no luminosity")
        if KIEL_DIAGRAM.name not in drawn:
            missing.append("no Kiel diagram: the profile maps no Teff or no log g")
        return "; ".join(missing)

    def write(self, report: ReportDirectory, summary: Mapping[str, Any],
              flags: FlagStatistics) -> None:
        """Draw the figures and stage them and the page in ``report`` (no-op without
        matplotlib)."""
        if not self.enabled:
            return
        rule_order = [r["id"] for r in summary["rules"] if r.get("flagged")]
        flagged = {r["id"]: r["flagged"] for r in summary["rules"] if r.get("flagged")}
        figures = []
        if self.data is not None:
            data = self.data

            def draw(spec: DiagramSpec) -> RenderedDiagram:
                return render(data.grids[spec.name], data.flagged_points(spec), rule_order,
                              flagged)

            # each figure after the first is drawn in a forked process at the same time
            # (drawing is a fixed fifth of a second or so per figure); matplotlib is
            # imported first, once, so the forked processes draw without importing it
            if len(self.specs) > 1:
                load_matplotlib()
            others: list[ForkedCall] = []
            try:
                others += [ForkedCall(functools.partial(draw, spec)) for spec in self.specs[1:]]
                figures = [draw(spec) for spec in self.specs[:1]]
                figures += [drawing.result() for drawing in others]
            finally:
                for drawing in others:
                    drawing.cancel()
        for figure in figures:
            report.write_bytes(figure.spec.file, figure.png)
        report.write_text(PAGE, html_page(summary, figures, flags, rule_order,
                                          self.missing_diagrams()))


def html_page(summary: Mapping[str, Any], figures: Sequence[RenderedDiagram],
              flags: FlagStatistics, rule_order: Sequence[str], missing: str = "") -> str:
    """The whole page as text (pure: the same inputs give the same text)."""
    gate = summary["gate"]
    verdict = "PASSED" if gate["passed"] else "FAILED"
    not_run = not_run_line(summary)
    sections = [
        f'<header class="{"pass" if gate["passed"] else "fail"}"><p class="tool">catcheck '
        f'{_e(summary["version"])}</p><h1>{verdict}</h1><p>{_e(gate["reason"])}</p>'
        + (f'<p class="not-run">{_e(not_run)}. {NOT_RUN_NEVER_FAILS}</p>'
           if not_run else "") + "</header>",
        _facts(summary),
        _findings(summary.get("catalogue_findings") or []),
        _diagrams(figures, missing),
        _rules(summary, rule_order),
        _worst(summary, flags, rule_order),
        f'<footer><p>{_e(CAUTION)}</p><p>Run <code>catcheck explain RULE</code> for a '
        "rule's formula, sources and caveats.</p></footer>",
    ]
    title = f"catcheck report: {summary['input']}"
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
            f"<title>{_e(title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n<main>\n"
            + "\n".join(s for s in sections if s) + "\n</main>\n</body>\n</html>\n")


def _e(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _facts(summary: Mapping[str, Any]) -> str:
    rows = summary["rows"]
    share = f", {100 * summary['flagged_rows'] / rows:.3g}% of rows" if rows else ""
    facts = [("input", f"<code>{_e(summary['input'])}</code>"),
             ("profile", f"<code>{_e(summary['profile'])}</code>"),
             ("rule packs", ", ".join(f"<code>{_e(p)}</code>" for p in summary["packs"])),
             ("rows read", f"{rows:,}"),
             (FLAGS_MEANING, _e(flag_total(summary))),
             (ROWS_MEANING, _e(row_total(summary)) + share)]
    items = "".join(f"<dt>{_e(name)}</dt><dd>{value}</dd>" for name, value in facts)
    return f'<dl class="facts">{items}</dl>'


def _findings(findings: Sequence[Mapping[str, Any]]) -> str:
    if not findings:
        return ""
    cards = "".join(
        f'<li class="{_e(f["severity"])}"><strong>{_e(f["quantity"])}</strong>: declared '
        f'{_e(f["declared_unit"])}, {"looks" if f["scope"] == "column" else "some rows look"}'
        f' like <strong>{_e(f["suggested_unit"])}</strong> '
        f'<span class="rule">{_e(f["rule"])}, {_e(f["severity"])}</span><br>'
        f'{_e(f["evidence"])}.</li>' for f in findings)
    return ('<section><h2>Catalogue-level findings</h2><p>Columns whose values contradict '
            "their declared unit, once per column; the rows are also flagged one by one."
            f'</p><ul class="findings">{cards}</ul></section>')


def _diagrams(figures: Sequence[RenderedDiagram], missing: str) -> str:
    blocks = []
    for figure in figures:
        data = base64.b64encode(figure.png).decode("ascii")
        caption = (f"{figure.stars:,} rows with both values drawn as a density image"
                   + (f" ({figure.beyond_axes:,} beyond the axes)" if figure.beyond_axes
                      else "")
                   + "; flagged rows on top, one colour and marker shape per rule (at most "
                   f"{POINTS_PER_RULE:,} per rule, chosen by row number hash)"
                   + (f"; {figure.points_on_edge:,} flagged points beyond the axes are drawn "
                      "on the frame as outlined triangles pointing outwards"
                      if figure.points_on_edge else "")
                   + f". Also saved as <code>{_e(figure.spec.file)}</code>.")
        width, height = figure.size
        blocks.append(f'<figure><img src="data:image/png;base64,{data}" '
                      f'alt="{_e(figure.spec.title)}" width="{width}" height="{height}">'
                      f"<figcaption>{caption}</figcaption></figure>")
    note = f'<p class="note">{_e(missing)}.</p>' if missing else ""
    if not blocks and not note:
        return ""
    return (f'<section><h2>Diagrams</h2>{note}<div class="figures">{"".join(blocks)}'
            "</div></section>")


def _rules(summary: Mapping[str, Any], rule_order: Sequence[str]) -> str:
    rows = summary["rows"] or 1
    most = max([r.get("flagged", 0) for r in summary["rules"]] + [1]) / rows
    lines = []
    for rule in summary["rules"]:
        swatch = _swatch(rule_order.index(rule["id"])) if rule["id"] in rule_order else ""
        if rule["status"] == "ran":
            share = rule["flagged"] / rows
            escalated = (f" ({rule['flagged_as_error']:,} as error)"
                         if rule.get("flagged_as_error") else "")
            missing, not_applicable = skipped_counts(rule)
            counts = (f'<td class="n">{rule["checked"]:,}</td><td class="n">{missing:,}</td>'
                      f'<td class="n">{not_applicable:,}</td><td class="n">'
                      f'{rule["flagged"]:,}{escalated}</td><td class="n">{100 * share:.3g}% '
                      f'<span class="bar" style="width:{_bar(share / most)}"></span></td>')
        else:
            counts = f'<td colspan="5" class="muted">{_e(rule["status"])}</td>'
        lines.append(f"<tr><td>{swatch}<code>{_e(rule['id'])}</code></td>"
                     f"<td>{_e(rule['pack'])}</td><td class=\"{_e(rule['severity'])}\">"
                     f"{_e(rule['severity'])}</td>{counts}<td>{_e(rule['summary'])}</td></tr>")
    return ("<section><h2>Rules</h2><table class=\"rules\"><thead><tr><th>rule</th>"
            "<th>pack</th><th>severity</th><th>checked</th><th>skipped: missing value</th>"
            "<th>skipped: not applicable</th><th>flagged</th><th>of all rows</th>"
            "<th>what it checks</th></tr></thead><tbody>"
            + "".join(lines) + "</tbody></table></section>")


def _bar(relative: float) -> str:
    """Width of a bar (1 for the longest), visible for anything above zero."""
    return "0" if relative <= 0 else f"{max(2.0, 60.0 * relative):.1f}px"


def _worst(summary: Mapping[str, Any], flags: FlagStatistics,
           rule_order: Sequence[str]) -> str:
    blocks = []
    for rule_id in rule_order:
        records = flags.worst(rule_id)
        if not records:
            continue
        rows = "".join(
            f'<tr><td class="n">{r["row"]:,}</td><td><code>{_e(r["id"])}</code></td>'
            f'<td class="{_e(r["severity"])}">{_e(r["severity"])}</td><td class="n">'
            f'{_deviation(r["deviation"])}</td><td>{_e(r["message"])}</td></tr>'
            for r in records)
        blocks.append(f"<h3>{_swatch(rule_order.index(rule_id))}<code>{_e(rule_id)}</code>"
                      "</h3><table class=\"worst\"><thead><tr>"
                      "<th>row</th><th>id</th><th>severity</th><th>deviation</th>"
                      f"<th>message</th></tr></thead><tbody>{rows}</tbody></table>")
    if not blocks:
        return ""
    return ("<section><h2>Worst flags by rule</h2><p>Each rule's flags with the largest "
            "deviation in combined sigma (rules that give none: the first flagged rows)."
            f"</p>{''.join(blocks)}</section>")


def _swatch(index: int) -> str:
    """The colour and marker shape of the run's ``index``-th flagged rule, as inline SVG
    (as drawn in the diagrams)."""
    colour, marker = rule_style(index)
    return (f'<svg class="swatch" width="12" height="12" viewBox="0 0 12 12" '
            f'aria-hidden="true"><g fill="{colour}">{_MARKER_SHAPES[marker]}</g></svg>')


def _polygon(corners: int, radius: float, turn: float = 0.0) -> str:
    """A regular polygon centred in the 12 x 12 swatch, a corner at the top (plus ``turn``
    degrees)."""
    points = " ".join(
        f"{6 + radius * math.sin(math.radians(turn + 360 * k / corners)):.2f},"
        f"{6 - radius * math.cos(math.radians(turn + 360 * k / corners)):.2f}"
        for k in range(corners))
    return f'<polygon points="{points}"/>'


_PLUS = ('<polygon points="4.2,0.8 7.8,0.8 7.8,4.2 11.2,4.2 11.2,7.8 7.8,7.8 7.8,11.2 '
         '4.2,11.2 4.2,7.8 0.8,7.8 0.8,4.2 4.2,4.2"{}/>')
#: the diagrams' marker shapes (matplotlib marker codes) as SVG
_MARKER_SHAPES = {
    "o": '<circle cx="6" cy="6" r="5"/>',
    "s": '<rect x="1.5" y="1.5" width="9" height="9"/>',
    "D": _polygon(4, 5.6),
    "P": _PLUS.format(""),
    "X": _PLUS.format(' transform="rotate(45 6 6)"'),
    "p": _polygon(5, 5.6),
    "h": _polygon(6, 5.6),
}


def _deviation(value: float | None) -> str:
    if value is None or value != value:
        return "&ndash;"
    return f"{value:.1f}&sigma;"


_CSS = """
:root{--ink:#1f2a33;--muted:#5c6b78;--line:#d9dde1;--pass:#2e7d4f;--fail:#b23a48;
--warn:#b7791f;--paper:#fbfbfa}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);
font:15px/1.45 system-ui,-apple-system,"Segoe UI","DejaVu Sans",sans-serif}
main{max-width:1460px;margin:0 auto;padding:0 24px 40px}
header{margin:0 -24px 18px;padding:18px 24px;color:#fff}
header.pass{background:var(--pass)}header.fail{background:var(--fail)}
header h1{margin:0;font-size:30px;letter-spacing:.04em}header p{margin:2px 0}
header .tool{opacity:.8;font-size:13px;text-transform:uppercase;letter-spacing:.08em}
h2{font-size:20px;border-bottom:2px solid var(--line);padding-bottom:4px;margin-top:30px}
h3{font-size:15px;margin:18px 0 6px}
code{font:13px ui-monospace,"DejaVu Sans Mono",monospace}
.facts{display:grid;grid-template-columns:max-content 1fr;gap:3px 16px;margin:0}
.facts dt{color:var(--muted)}.facts dd{margin:0}
.findings{list-style:none;padding:0}
.findings li{border-left:5px solid var(--warn);background:#fff;padding:8px 12px;
margin:6px 0;box-shadow:0 1px 2px rgba(0,0,0,.06)}
.findings li.error{border-color:var(--fail)}
.findings .rule{color:var(--muted);font-size:13px;white-space:nowrap}
.figures{display:flex;flex-wrap:wrap;gap:18px}
figure{margin:0;background:#fff;padding:8px;border:1px solid var(--line);
flex:1 1 520px;max-width:716px}
figure img{display:block;max-width:100%;height:auto}
figcaption{color:var(--muted);font-size:13px;padding:6px 4px 0}
table{border-collapse:collapse;background:#fff;width:100%}
th,td{border-bottom:1px solid var(--line);padding:4px 8px;text-align:left;
vertical-align:top;font-size:14px}
th{background:#eef0f2;font-weight:600}
td.n{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
td.error{color:var(--fail);font-weight:600}td.warning{color:var(--warn);font-weight:600}
.muted,.note{color:var(--muted)}
.swatch{display:inline-block;vertical-align:-1px;margin-right:6px}
header .not-run{font-weight:600}
.bar{display:inline-block;height:9px;background:var(--fail);vertical-align:middle;
opacity:.7;margin-left:4px}
table.worst{table-layout:fixed}
table.worst th:nth-child(1){width:90px}table.worst th:nth-child(2){width:170px}
table.worst th:nth-child(3){width:90px}table.worst th:nth-child(4){width:90px}
table.worst td{overflow-wrap:anywhere}
footer{margin-top:34px;color:var(--muted);font-size:13px}
"""
