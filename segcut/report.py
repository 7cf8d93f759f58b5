"""The run report: one self-contained HTML page to look through a folder of splits.

:func:`render_report` turns result rows (as :func:`segcut.batch.write_report` builds
them from ``records.jsonl``) into a page that needs nothing from the network: styles
and scripts are inline, overlay thumbnails are embedded as ``data:`` URIs, and the
two distribution plots are inline SVG drawn here. The page has

- the run's configuration (prior, box, method, ...) and a link to its ``run.toml``;
- a table with one row per image: a thumbnail (click it to see the full overlay
  enlarged; with the run's confidence maps, a small one of the map beside it), then
  the columns of :data:`segcut.columns.OUTPUT_COLUMNS` with the flags after the
  status, and the warnings or error. With confidence measured, the rows start most
  uncertain first. Clicking a column heading sorts by it (again: the other way
  round); a text box, a status choice and a "flagged only" switch filter the rows;
- flags for splits that deserve a look (:func:`flag_row`), each explained below the
  table (:data:`FLAG_MEANINGS`), with a legend of the overlay's colours;
- histograms of the certified gap and of the foreground fraction.

Opening the page as ``report.html#selftest`` runs a check inside the browser (every
thumbnail decodes, sorting reorders rows, filtering hides rows) and writes the
result as JSON into the element ``<pre id="selftest">``; the test suite reads it
with a headless browser. This module only builds text; it reads and writes no files.
"""

from __future__ import annotations

import base64
import html
import math
from typing import Sequence

__all__ = ["FLAG_MEANINGS", "FLAG_RULES", "flag_row", "histogram_svg", "render_report"]

#: Default thresholds of :func:`flag_row`. ``max_disagreement``: on the dev sets (no
#: prior, one run) the images above 0.5 scored mean IoU 0.674 (16 of 100 microscopy
#: images) and 0.563 (22 of 60 photographs) against 0.789 and 0.712 for the rest; at
#: 0.3 the flag also fell on images that came out well (flagged 0.686 and 0.595).
FLAG_RULES = {
    "min_foreground": 0.02,
    "max_foreground": 0.90,
    "max_gap": 0.05,
    "max_frame": 0.5,
    "max_disagreement": 0.5,
    "max_refine_change": 0.05,
    "max_uncertain": 0.2,
}

#: What each flag means (shown on the page beside the table).
FLAG_MEANINGS = {
    "failed": "the input could not be split; the error says why",
    "tiny foreground": "less than {min_foreground:.0%} of the pixels are foreground: the object "
                       "may have been missed",
    "huge foreground": "more than {max_foreground:.0%} of the pixels are foreground: the sides "
                       "may be swapped, or the object fills the picture",
    "hugs the frame": "more than {max_frame:.0%} of the image's outermost pixels are foreground: "
                      "the object is cut off by the frame, or background was taken for it",
    "hypotheses disagree": "the kept split and the best competing start hypothesis differ by "
                           "more than {max_disagreement:.0%} (1 - IoU): the picture allows two "
                           "readings; check that the kept one is the object",
    "refinement changed much": "the pixel-level boundary refinement moved more than "
                               "{max_refine_change:.0%} of the pixels: the superpixels fitted "
                               "the object poorly",
    "uncertain": "more than {max_uncertain:.0%} of the pixels are uncertain (confidence below "
                 "the run's uncertain_level): another split costs the graph almost nothing "
                 "there; the most uncertain splits are the likeliest to be wrong, so review "
                 "them first",
    "large gap": "the certified gap of the solver's split is above {max_gap:.0%}: a better cut "
                 "of this graph may exist",
    "no bound": "the method gave no certified upper bound",
    "warnings": "reading or splitting the input left notes (see the last column)",
}


def _above(row: dict, key: str, limit: float) -> bool:
    value = row.get(key)
    return isinstance(value, (int, float)) and value > limit


def flag_row(row: dict, *, min_foreground: float = FLAG_RULES["min_foreground"],
             max_foreground: float = FLAG_RULES["max_foreground"],
             max_gap: float = FLAG_RULES["max_gap"], max_frame: float = FLAG_RULES["max_frame"],
             max_disagreement: float = FLAG_RULES["max_disagreement"],
             max_refine_change: float = FLAG_RULES["max_refine_change"],
             max_uncertain: float = FLAG_RULES["max_uncertain"]) -> list[str]:
    """Reasons a split deserves a look (an empty list when none).

    Each flag comes from a signal the run recorded; a signal a record does not have
    (an older version wrote it) raises no flag. :data:`FLAG_MEANINGS` says what each
    one means.

    Parameters
    ----------
    row : dict
        With ``status``, ``foreground_fraction``, ``gap`` and ``warnings``; optionally
        ``frame_fraction``, ``hypothesis_disagreement``, ``refine_changed_fraction``
        and ``uncertain_fraction``.
    min_foreground, max_foreground : float
        A foreground fraction below ``min_foreground`` is flagged ``"tiny foreground"``,
        above ``max_foreground`` ``"huge foreground"``.
    max_gap : float
        A certified relative gap of the solver's split (``solver_gap``; ``gap`` in
        records that lack it) above this is flagged ``"large gap"``.
    max_frame : float
        A share of foreground among the frame's pixels above this is flagged
        ``"hugs the frame"``.
    max_disagreement : float
        A ``hypothesis_disagreement`` above this is flagged ``"hypotheses disagree"``.
    max_refine_change : float
        A ``refine_changed_fraction`` above this is flagged ``"refinement changed much"``.
    max_uncertain : float
        An ``uncertain_fraction`` above this is flagged ``"uncertain"``.

    Returns
    -------
    list of str
        Keys of :data:`FLAG_MEANINGS`, in its order.

    Examples
    --------
    >>> flag_row({"status": "ok", "foreground_fraction": 0.01, "gap": 0.08, "warnings": []})
    ['tiny foreground', 'large gap']
    >>> flag_row({"status": "ok", "foreground_fraction": 0.6, "gap": 0.0, "warnings": [],
    ...           "frame_fraction": 0.8, "hypothesis_disagreement": 0.55})
    ['hugs the frame', 'hypotheses disagree']
    >>> flag_row({"status": "failed", "error": "x.png: empty file"})
    ['failed']
    """
    if row.get("status") != "ok":
        return ["failed"]
    found = {
        "tiny foreground": row.get("foreground_fraction") is not None
        and row["foreground_fraction"] < min_foreground,
        "huge foreground": _above(row, "foreground_fraction", max_foreground),
        "hugs the frame": _above(row, "frame_fraction", max_frame),
        "hypotheses disagree": _above(row, "hypothesis_disagreement", max_disagreement),
        "refinement changed much": _above(row, "refine_changed_fraction", max_refine_change),
        "uncertain": _above(row, "uncertain_fraction", max_uncertain),
        "large gap": _above(row, "solver_gap" if row.get("solver_gap") is not None else "gap",
                            max_gap),
        "no bound": row.get("gap") is None,
        "warnings": bool(row.get("warnings")),
    }
    return [flag for flag in FLAG_MEANINGS if found.get(flag)]


def _nice_ceiling(value: float) -> float:
    """The smallest of 1, 2, 2.5, 5 times a power of ten that is >= value."""
    if not value > 0:
        return 1.0
    power = 10.0 ** math.floor(math.log10(value))
    for step in (1.0, 2.0, 2.5, 5.0, 10.0):
        if step * power >= value * (1 - 1e-12):
            return step * power
    return 10.0 * power  # pragma: no cover - the loop always returns


def _fmt_tick(value: float, scale: float) -> str:
    text = f"{value * scale:.4g}"
    return text


def histogram_svg(values: Sequence[float], *, lo: float = 0.0, hi: float | None = None,
                  n_bins: int = 20, title: str = "", scale: float = 1.0, unit: str = "",
                  width: int = 360, height: int = 180) -> str:
    """An inline SVG histogram (bars, axis, counts) of ``values``.

    Parameters
    ----------
    values : sequence of float
        None and non-finite values are left out.
    lo, hi : float
        The range; ``hi`` defaults to a round number at or above the largest value.
        Values outside the range are counted in the first or last bar.
    n_bins : int
        Number of bars.
    title : str
        Caption above the plot.
    scale, unit : float, str
        Tick labels show ``value * scale`` followed by ``unit`` (e.g. 100 and "%").
    width, height : int
        Size in pixels.

    Returns
    -------
    str
        An ``<svg>`` element.

    Examples
    --------
    >>> svg = histogram_svg([0.1, 0.2, 0.2, 0.9], lo=0.0, hi=1.0, n_bins=4, title="x")
    >>> svg.count("<rect class=\\"bar\\"")
    4
    >>> '<title>0.25 to 0.5: 0</title>' in svg
    True
    """
    import numpy as np

    clean = np.array([float(v) for v in values if v is not None and math.isfinite(float(v))])
    if hi is None:
        hi = _nice_ceiling(float(clean.max()) if clean.size else 0.0)
    if not hi > lo:
        hi = lo + 1.0
    # bins [e_k, e_k+1), the last one closed; values outside go to the end bars
    edges = np.linspace(lo, hi, n_bins + 1)
    index = np.clip(np.searchsorted(edges, clean, side="right") - 1, 0, n_bins - 1)
    index[clean == hi] = n_bins - 1
    counts = np.bincount(index, minlength=n_bins).tolist()
    top = max(counts, default=0) or 1
    left, right, upper, lower = 34, 24, 24, 30
    plot_w, plot_h = width - left - right, height - upper - lower
    bar_w = plot_w / n_bins
    parts = [f'<svg class="hist" width="{width}" '
             f'height="{height}" viewBox="0 0 {width} {height}" role="img" '
             f'aria-label="{html.escape(title)}">',
             f'<text x="{left}" y="15" class="cap">{html.escape(title)} '
             f'({clean.size} images)</text>']
    for k, count in enumerate(counts):
        h = plot_h * count / top
        x = left + k * bar_w
        a, b = lo + (hi - lo) * k / n_bins, lo + (hi - lo) * (k + 1) / n_bins
        label = f"{_fmt_tick(a, scale)} to {_fmt_tick(b, scale)}{unit}: {count}"
        parts.append(f'<rect class="bar" x="{x + 1:.1f}" y="{upper + plot_h - h:.1f}" '
                     f'width="{max(bar_w - 2, 1):.1f}" height="{h:.1f}">'
                     f'<title>{html.escape(label)}</title></rect>')
    base = upper + plot_h
    parts.append(f'<line class="axis" x1="{left}" y1="{base}" x2="{left + plot_w}" y2="{base}"/>')
    for frac in (0.0, 0.5, 1.0):
        x = left + plot_w * frac
        parts.append(f'<text x="{x:.1f}" y="{base + 16}" class="tick" text-anchor="middle">'
                     f'{_fmt_tick(lo + (hi - lo) * frac, scale)}{html.escape(unit)}</text>')
    parts.append(f'<text x="{left - 4}" y="{upper + 4}" class="tick" text-anchor="end">{top}</text>')
    parts.append(f'<text x="{left - 4}" y="{base}" class="tick" text-anchor="end">0</text>')
    parts.append("</svg>")
    return "".join(parts)


_STYLE = """
:root { --ink:#1d2430; --muted:#5f6b7a; --line:#d9dee5; --head:#24364b; --accent:#1f7a74;
        --flag:#b3541e; --ok:#2d7d46; --bad:#a8322d; --paper:#f7f8fa; }
* { box-sizing: border-box; }
body { margin:0; font:14px/1.4 system-ui, sans-serif; color:var(--ink); background:var(--paper); }
header { background:var(--head); color:#fff; padding:14px 22px; }
header h1 { margin:0; font-size:19px; font-weight:600; }
header p { margin:4px 0 0; color:#c9d4e0; }
main { padding:14px 22px; }
.plots { display:flex; flex-wrap:wrap; gap:18px; margin-bottom:12px; }
.plots figure { margin:0; background:#fff; border:1px solid var(--line); border-radius:6px; padding:6px; }
.hist .bar { fill:var(--accent); } .hist .axis { stroke:var(--muted); }
.hist .cap { font-size:12px; font-weight:600; fill:var(--ink); }
.hist .tick { font-size:10px; fill:var(--muted); }
.controls { display:flex; flex-wrap:wrap; gap:14px; align-items:center; margin:8px 0 10px; }
.controls input[type=search] { width:260px; padding:4px 6px; }
#shown { color:var(--muted); }
table { border-collapse:collapse; background:#fff; width:100%; }
th, td { border-bottom:1px solid var(--line); padding:4px 8px; text-align:left; vertical-align:middle; }
th { position:sticky; top:0; background:#e9edf2; cursor:pointer; user-select:none; white-space:nowrap; }
th[data-dir=asc]::after { content:" \\25B2"; } th[data-dir=desc]::after { content:" \\25BC"; }
td.num { text-align:right; font-variant-numeric:tabular-nums; }
td.thumb img { display:block; max-width:240px; max-height:240px; cursor:zoom-in; }
td.thumb { white-space:nowrap; } td.thumb a { display:inline-block; vertical-align:top; }
td.thumb img.confidence { max-width:96px; max-height:96px; margin-left:4px;
                          border:1px solid var(--line); }
.settings dl { display:flex; flex-wrap:wrap; gap:6px 22px; margin:4px 0; }
.settings dt { color:var(--muted); font-size:12px; } .settings dd { margin:0; font-weight:600; }
h2 { font-size:15px; margin:10px 0 4px; }
.flags ul { margin:4px 0; padding-left:18px; } .flags li { margin:3px 0; }
.swatch { display:inline-block; width:14px; height:14px; vertical-align:middle; }
.swatch.fg { background:#5cb0a9; border:2px solid #ffb000; } .swatch.bg { background:#969696; }
#lightbox { position:fixed; inset:0; background:rgba(10,12,20,0.88); display:flex;
            flex-direction:column; align-items:center; justify-content:center; z-index:10;
            cursor:zoom-out; }
#lightbox[hidden] { display:none; }
#lightbox img { max-width:94vw; max-height:88vh; image-rendering:auto; background:#fff; }
#lightbox p { color:#c9d4e0; margin:6px 0 0; }
.status-ok { color:var(--ok); } .status-failed { color:var(--bad); font-weight:600; }
.flag { display:inline-block; margin:1px 2px; padding:0 6px; border-radius:9px; font-size:12px;
        background:#fbe9dc; color:var(--flag); border:1px solid #efc3a5; }
.note { color:var(--muted); font-size:12px; max-width:360px; }
.none { color:var(--muted); font-style:italic; }
"""

_SCRIPT = r"""
(function () {
  const table = document.getElementById('results');
  const body = table.tBodies[0];
  const heads = Array.from(table.tHead.rows[0].cells);
  const search = document.getElementById('filter-text');
  const status = document.getElementById('filter-status');
  const flagged = document.getElementById('filter-flagged');
  const shown = document.getElementById('shown');

  function key(row, col, numeric) {
    const v = row.cells[col].dataset.sort;
    if (numeric) { const x = parseFloat(v); return isNaN(x) ? null : x; }
    return (v === undefined ? row.cells[col].textContent : v).toLowerCase();
  }
  function sortBy(col, dir) {
    const numeric = heads[col].dataset.type === 'num';
    const rows = Array.from(body.rows);
    rows.sort(function (a, b) {
      const x = key(a, col, numeric), y = key(b, col, numeric);
      if (x === null && y === null) return 0;
      if (x === null) return 1;            // missing values last, either way
      if (y === null) return -1;
      const c = x < y ? -1 : x > y ? 1 : 0;
      return dir === 'asc' ? c : -c;
    });
    rows.forEach(function (r) { body.appendChild(r); });
    heads.forEach(function (h) { h.removeAttribute('data-dir'); });
    heads[col].dataset.dir = dir;
  }
  heads.forEach(function (h, col) {
    if (h.dataset.type === 'none') return;
    h.addEventListener('click', function () {
      sortBy(col, h.dataset.dir === 'asc' ? 'desc' : 'asc');
    });
  });
  function applyFilter() {
    const text = search.value.trim().toLowerCase();
    let n = 0;
    Array.from(body.rows).forEach(function (r) {
      const ok = (!text || r.dataset.text.indexOf(text) >= 0)
        && (status.value === 'all' || r.dataset.status === status.value)
        && (!flagged.checked || r.dataset.flagged === '1');
      r.hidden = !ok;
      if (ok) n += 1;
    });
    shown.textContent = n + ' of ' + body.rows.length + ' images shown';
  }
  [search, status, flagged].forEach(function (el) {
    el.addEventListener('input', applyFilter);
    el.addEventListener('change', applyFilter);
  });
  applyFilter();
  const box = document.getElementById('lightbox');
  const boxImg = box.querySelector('img');
  function enlarge(link) {
    const thumb = link.querySelector('img');
    boxImg.onerror = function () { boxImg.onerror = null; boxImg.src = thumb.src; };
    boxImg.src = link.getAttribute('href');
    box.hidden = false;
  }
  function shrink() { box.hidden = true; boxImg.removeAttribute('src'); }
  Array.from(table.querySelectorAll('a.zoom')).forEach(function (a) {
    a.addEventListener('click', function (e) { e.preventDefault(); enlarge(a); });
  });
  box.addEventListener('click', shrink);
  document.addEventListener('keydown', function (e) { if (e.key === 'Escape') shrink(); });
  window.segcutReport = { sortBy: sortBy, applyFilter: applyFilter, enlarge: enlarge };

  async function selftest() {
    const out = { thumbnails: 0, thumbnails_ok: 0, rows: body.rows.length };
    const imgs = Array.from(table.querySelectorAll('td.thumb img'));
    out.thumbnails = imgs.length;
    out.thumbnails_ok = imgs.filter(function (i) { return i.complete && i.naturalWidth > 0; }).length;
    const inputCol = heads.findIndex(function (h) { return h.dataset.key === 'input'; });
    const names = function () { return Array.from(body.rows).map(function (r) { return r.dataset.input; }); };
    out.initial = names();
    const results = {};
    heads.forEach(function (h, col) {
      if (h.dataset.type === 'none') return;
      h.click();
      const asc = names();
      h.click();
      const desc = names();
      results[h.dataset.key] = { asc: asc, desc: desc, dir: h.dataset.dir };
    });
    out.sorted = results;
    sortBy(inputCol, 'asc');
    search.value = out.initial.length ? out.initial[0].toLowerCase() : '';
    applyFilter();
    out.filter_text = search.value;
    out.filter_visible = Array.from(body.rows).filter(function (r) { return !r.hidden; }).map(function (r) { return r.dataset.input; });
    search.value = '';
    flagged.checked = true;
    applyFilter();
    out.flagged_visible = Array.from(body.rows).filter(function (r) { return !r.hidden; }).map(function (r) { return r.dataset.input; });
    flagged.checked = false;
    applyFilter();
    out.svg_plots = document.querySelectorAll('svg.hist').length;
    const zoom = table.querySelector('a.zoom');
    if (zoom) {
      zoom.click();
      out.lightbox_opened = !box.hidden;
      box.click();
      out.lightbox_closed = box.hidden;
    }
    out.done = true;
    document.getElementById('selftest').textContent = JSON.stringify(out);
  }
  if (location.hash === '#selftest') {
    // after the load event every thumbnail (an embedded image) has loaded or failed,
    // so the check needs no wait on the browser's clock
    window.addEventListener('load', function () {
      selftest().catch(function (e) {
        document.getElementById('selftest').textContent = JSON.stringify({ error: String(e) });
      });
    });
  }
})();
"""

def _number_cell(value, text: str) -> str:
    if value is None:
        return '<td class="num" data-sort=""><span class="none">-</span></td>'
    return f'<td class="num" data-sort="{float(value)!r}">{html.escape(text)}</td>'


def _shown_columns(rows: Sequence[dict]) -> list:
    """The data columns of the table: those in the report, optional ones only with values."""
    from .columns import OUTPUT_COLUMNS

    return [c for c in OUTPUT_COLUMNS if c.in_report
            and (not c.optional or any(r.get(c.key) is not None for r in rows))]


def _zoom_link(thumb: bytes, link: str | None, alt: str, css: str, title: str) -> str:
    mime = "image/jpeg" if thumb[:2] == b"\xff\xd8" else "image/png"
    src = f"data:{mime};base64," + base64.b64encode(thumb).decode("ascii")
    img = f'<img class="{css}" src="{src}" alt="{html.escape(alt)}">'
    return (f'<a class="zoom" href="{html.escape(link or src)}" '
            f'title="{html.escape(title)}">{img}</a>')


def _thumbnail_cell(row: dict, name: str) -> str:
    thumb = row.get("thumbnail")
    if not thumb:
        return '<td class="thumb"><span class="none">no overlay</span></td>'
    parts = [_zoom_link(thumb, row.get("overlay"), f"overlay of {name}", "overlay",
                        "click to enlarge")]
    confidence = row.get("confidence_thumbnail")
    if confidence:
        parts.append(_zoom_link(confidence, row.get("confidence"), f"confidence map of {name}",
                                "confidence", "confidence map (dark: uncertain); click to "
                                "enlarge"))
    return f'<td class="thumb">{"".join(parts)}</td>'


def _review_order(rows: Sequence[dict]) -> list:
    """Rows with the most uncertain splits first (as sorting by that column, descending:
    rows without a value last), when the run measured confidence; else as given."""
    def key(row):
        value = row.get("uncertain_fraction")
        if not isinstance(value, (int, float)) or not math.isfinite(value):
            return (1, 0.0)
        return (0, -float(value))

    if not any(isinstance(r.get("uncertain_fraction"), (int, float)) for r in rows):
        return list(rows)
    return sorted(rows, key=key)  # stable: ties keep their order (by input)


def _table_row(row: dict, columns: list, flags: list) -> str:
    from .columns import format_value

    name = str(row.get("input", ""))
    status = str(row.get("status", ""))
    warnings_ = [str(w) for w in (row.get("warnings") or [])]
    notes = ([row["error"]] if row.get("error") else []) + warnings_
    search_text = " ".join([name, status, *flags, *notes]).lower()
    cells = [_thumbnail_cell(row, name)]
    for column in columns:
        value = row.get(column.key)
        if column.key == "input":
            cells.append(f'<td data-sort="{html.escape(name.lower())}">{html.escape(name)}</td>')
        elif column.key == "status":
            cells.append(f'<td class="status-{html.escape(status)}">{html.escape(status)}</td>')
            cells.append(f'<td data-sort="{html.escape(" ".join(flags))}">'
                         + "".join(f'<span class="flag">{html.escape(f)}</span>' for f in flags)
                         + "</td>")
        elif column.kind == "num":
            cells.append(_number_cell(value, format_value(column, value)))
        else:
            cells.append(f"<td>{html.escape(format_value(column, value))}</td>")
    cells.append('<td class="note">' + "<br>".join(html.escape(n) for n in notes) + "</td>")
    return (f'<tr data-input="{html.escape(name)}" data-status="{html.escape(status)}" '
            f'data-flagged="{int(bool(flags))}" data-text="{html.escape(search_text)}">'
            + "".join(cells) + "</tr>")


def _heads(columns: list, sorted_by: str | None = None) -> str:
    heads = [("thumbnail", "overlay", "none", "click a picture to enlarge it")]
    for c in columns:
        heads.append((c.key, c.heading, "num" if c.kind == "num" else "text", c.meaning))
        if c.key == "status":
            heads.append(("flags", "flags", "text", "splits that deserve a look (see below)"))
    heads.append(("notes", "warnings / error", "text", ""))
    return "".join(f'<th data-key="{key}" data-type="{kind}" title="{html.escape(meaning)}"'
                   + (' data-dir="desc"' if key == sorted_by else "")
                   + f'>{html.escape(label)}</th>' for key, label, kind, meaning in heads)


def _settings_section(settings: dict | None, config_link: str | None) -> str:
    if not settings and not config_link:
        return ""
    items = "".join(f"<div><dt>{html.escape(k)}</dt><dd>{html.escape(str(v))}</dd></div>"
                    for k, v in (settings or {}).items())
    link = (f'<p>The full configuration, with package versions: '
            f'<a href="{html.escape(config_link)}">{html.escape(config_link)}</a></p>'
            if config_link else "")
    return f'<section class="settings"><h2>Configuration</h2><dl>{items}</dl>{link}</section>'


def _flags_section(rules: dict, counts: dict, confidence_maps: bool = False) -> str:
    items = "".join(
        f'<li><span class="flag">{html.escape(flag)}</span> '
        f"{html.escape(meaning.format(**rules))} ({counts.get(flag, 0)})</li>"
        for flag, meaning in FLAG_MEANINGS.items())
    return (f'<section class="flags"><h2>What the flags mean</h2><ul>{items}</ul>'
            f'<p class="legend"><span class="swatch fg"></span> foreground (shaded, '
            f'outlined) <span class="swatch bg"></span> background (as in the image)</p>'
            + ('<p class="legend">The small gray picture beside an overlay is the confidence '
               'map: white where the side of a pixel is certain, darker where it is not '
               '(mid-gray: either side costs the same).</p>' if confidence_maps else "")
            + "</section>")


def _plural(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def render_report(rows: Sequence[dict], *, title: str = "segcut run",
                  flag_options: dict | None = None, settings: dict | None = None,
                  config_link: str | None = None) -> str:
    """Build the self-contained HTML report of a run.

    Parameters
    ----------
    rows : sequence of dict
        One per image, keyed by the columns of :data:`segcut.columns.OUTPUT_COLUMNS`
        (``input``, ``status``, ``foreground_fraction``, ``cut_value``, ...;
        ``warnings`` a list of str, ``error`` str or None), and optionally
        ``thumbnail`` (PNG or JPEG bytes) and ``overlay`` (a link, relative to the
        page), ``confidence_thumbnail`` and ``confidence`` (the same for the
        confidence map, shown small beside the overlay). Optional columns without a
        value in any row are left out. When some row has an ``uncertain_fraction``,
        the rows come most uncertain first (as that column sorted descending).
    title : str
        Shown as the page heading.
    flag_options : dict, optional
        Thresholds passed to :func:`flag_row`.
    settings : dict, optional
        The run's settings to state on the page (name: value).
    config_link : str, optional
        Link to the full configuration file (``run.toml``), relative to the page.

    Returns
    -------
    str
        The page (UTF-8 text). It loads nothing from the network.

    Examples
    --------
    >>> page = render_report([{"input": "a.png", "status": "ok", "foreground_fraction": 0.3,
    ...                        "cut_value": 10.0, "upper_bound": 10.2, "gap": 0.0196,
    ...                        "n_superpixels": 900, "seconds": 0.4, "warnings": []}])
    >>> page.startswith("<!DOCTYPE html>"), page.count('<tr data-input='), "http" in page
    (True, 1, False)
    """
    flag_options = dict(flag_options or {})
    rules = {**FLAG_RULES, **flag_options}
    columns = _shown_columns(rows)
    rows = _review_order(rows)
    by_uncertain = any(c.key == "uncertain_fraction" for c in columns)
    body_rows, counts = [], {}
    for row in rows:
        flags = flag_row(row, **flag_options)
        for flag in flags:
            counts[flag] = counts.get(flag, 0) + 1
        body_rows.append(_table_row(row, columns, flags))
    n_flagged = sum(1 for r in body_rows if 'data-flagged="1"' in r)
    n_failed = sum(1 for r in rows if r.get("status") != "ok")
    ok_rows = [r for r in rows if r.get("status") == "ok"]
    gap_plot = histogram_svg([r.get("gap") for r in ok_rows], title="certified gap",
                             scale=100.0, unit="%")
    fg_plot = histogram_svg([r.get("foreground_fraction") for r in ok_rows], lo=0.0, hi=1.0,
                            title="foreground fraction")
    summary = (f"{_plural(len(rows), 'image')}: {len(rows) - n_failed} split, {n_failed} failed, "
               f"{n_flagged} flagged (see what the flags mean below the table)")
    if by_uncertain:
        summary += "; the most uncertain splits come first"
    return "\n".join([
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{html.escape(title)} - segcut report</title>",
        f"<style>{_STYLE}</style></head><body>",
        f"<header><h1>{html.escape(title)}</h1><p>{html.escape(summary)}</p></header>",
        "<main>",
        _settings_section(settings, config_link),
        f'<section class="plots"><figure>{gap_plot}</figure><figure>{fg_plot}</figure></section>',
        '<section class="controls">'
        '<label>find <input type="search" id="filter-text" placeholder="name, flag, warning"></label>'
        '<label>status <select id="filter-status"><option value="all">all</option>'
        '<option value="ok">ok</option><option value="failed">failed</option></select></label>'
        '<label><input type="checkbox" id="filter-flagged"> flagged only</label>'
        '<span id="shown"></span></section>',
        f'<table id="results"><thead><tr>'
        f'{_heads(columns, "uncertain_fraction" if by_uncertain else None)}</tr></thead><tbody>',
        *body_rows,
        "</tbody></table>",
        _flags_section(rules, counts, any(r.get("confidence_thumbnail") for r in rows)),
        '<div id="lightbox" hidden><img alt="enlarged overlay"><p>click or press Escape to '
        'close</p></div>',
        '<pre id="selftest" hidden></pre>',
        f"<script>{_SCRIPT}</script>",
        "</main></body></html>",
        "",
    ])
