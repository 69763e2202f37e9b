"""The night report: one self-contained HTML file.

Everything is inside the file (images as base64 ``data:`` URIs, a few lines of CSS and a
small inline script that sorts tables), so it opens offline from a disc or a mail
attachment. Order of the page: the provisional-types statement and summary counts, the
follow-up list, the table of all spectra (click a header to sort; each star links to its
section), night-level plots, the failures with their causes, the flag legend with the
night's counts, and one section per spectrum (values, flags explained, notes, the lines
measured, the figure).

Precision shown (common practice: one digit beyond the typical error, no more):
velocities 0.1 km/s (v sin i 1 km/s, an upper limit as ``< 168``), Teff 100 K, log g and
He/H 0.01, EWs 0.01 A, S/N 1. The tables (``results.ecsv``) keep full precision.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import math
import os
from collections import Counter
from collections.abc import Mapping, Sequence

__all__ = ["write_report", "render_report", "night_plots"]

_CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:1.5em auto;
max-width:1200px;color:#1b2631;padding:0 1em}
h1{font-size:1.5em;margin-bottom:.2em}h2{border-bottom:1px solid #ccd;margin-top:1.6em}
.note{background:#fdf2e9;border-left:4px solid #d35400;padding:.5em 1em}
table{border-collapse:collapse;font-size:.82em;width:100%}
th,td{border-bottom:1px solid #e5e8e8;padding:.25em .45em;text-align:left;vertical-align:top}
th{background:#eaf2f8;cursor:pointer;user-select:none;position:sticky;top:0}
th.sorted-asc:after{content:" \\25B2"}th.sorted-desc:after{content:" \\25BC"}
td.num{text-align:right;font-variant-numeric:tabular-nums}
tr.failed td{color:#922b21}.flags{color:#922b21}
.counts span{display:inline-block;margin:0 1.2em .3em 0}
.plots img,.stars img{max-width:100%;height:auto;border:1px solid #eee;margin:.3em 0}
.plots{display:flex;flex-wrap:wrap;gap:1em}.plots figure{margin:0;flex:1 1 360px}
figcaption{font-size:.8em;color:#555}
section.star{border-top:1px solid #ccd;margin-top:1.2em}section.star h3{margin:.5em 0 .2em}
dl.values{display:grid;grid-template-columns:max-content 1fr;gap:.1em 1em;font-size:.85em}
dl.values dt{color:#555}dl.values dd{margin:0}
table.lines{width:auto;font-size:.78em}
"""

_JS = """
(function(){
  function key(td){var v=td.getAttribute('data-sort');if(v===null){v=td.textContent;}
    var n=parseFloat(v);return isNaN(n)?v.toLowerCase():n;}
  document.querySelectorAll('table.sortable').forEach(function(table){
    var heads=table.querySelectorAll('thead th');
    heads.forEach(function(th,i){th.addEventListener('click',function(){
      var asc=!th.classList.contains('sorted-asc');
      heads.forEach(function(h){h.classList.remove('sorted-asc','sorted-desc');});
      th.classList.add(asc?'sorted-asc':'sorted-desc');
      var body=table.tBodies[0];var rows=Array.prototype.slice.call(body.rows);
      rows.sort(function(a,b){var x=key(a.cells[i]),y=key(b.cells[i]);
        if(typeof x!==typeof y){x=String(x);y=String(y);}
        return (x<y?-1:x>y?1:0)*(asc?1:-1);});
      rows.forEach(function(r){body.appendChild(r);});});});});
})();
"""


def _e(value) -> str:
    return html.escape("" if value is None else str(value))


def _num(value, fmt: str) -> str:
    """``value`` formatted, '' when not a finite number; never a negative zero."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return ""
    if not math.isfinite(v):
        return ""
    text = format(v, fmt)
    if text.startswith("-") and not any(c in "123456789" for c in text.split("e")[0]):
        text = format(0.0, fmt)
    return text


def _td_num(value, fmt: str) -> str:
    text = _num(value, fmt)
    sort = text if text else "-1e99"
    return f'<td class="num" data-sort="{sort}">{text}</td>'


def _rounded(value, step: float) -> float:
    """``value`` rounded to a multiple of ``step`` (NaN stays NaN)."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return math.nan
    return round(v / step) * step if math.isfinite(v) else math.nan


def teff_text(value) -> str:
    """Teff to the nearest 100 K, e.g. ``31200``; '' when unknown."""
    return _num(_rounded(value, 100.0), ".0f")


def vsini_text(row: Mapping) -> str:
    """v sin i to 1 km/s; an upper limit (``vsini_limit``) as ``< 168``."""
    text = _num(row.get("vsini"), ".0f")
    return f"&lt; {text}" if text and row.get("vsini_limit") else text


def _td_text(html_text: str, sort) -> str:
    sort_text = _num(sort, ".6g") or "-1e99"
    return f'<td class="num" data-sort="{sort_text}">{html_text}</td>'


def _img(png: bytes, alt: str, cls: str = "") -> str:
    data = base64.b64encode(png).decode("ascii")
    c = f' class="{cls}"' if cls else ""
    return f'<img{c} alt="{_e(alt)}" src="data:image/png;base64,{data}">'


def _star_name(row: Mapping) -> str:
    name = row.get("object") or os.path.basename(str(row.get("file", "")))
    return f"{name} [{row['label']}]" if row.get("label") else name


def _anchor(row: Mapping) -> str:
    """Id of a spectrum's section: from the file name and label (unique in a night)."""
    key = f"{os.path.basename(str(row.get('file', '')))}-{row.get('label') or ''}"
    return "star-" + "".join(c if c.isalnum() else "-" for c in key).strip("-")


def _summary(rows: Sequence[Mapping], followup, ignored) -> str:
    from starlines.flags import split_flags

    files = {r["file"] for r in rows}
    failed = sum(r["status"] == "failed" for r in rows)
    counts = Counter(f for r in rows for f in split_flags(r.get("flags", "")))
    items = [("files", len(files)), ("spectra", len(rows)), ("analysed", len(rows) - failed),
             ("failed", failed), ("on the follow-up list", len(followup)),
             ("other files ignored", len(ignored))]
    head = "".join(f"<span><b>{n}</b> {_e(t)}</span>" for t, n in items)
    flags = ", ".join(f"{_e(k)}: {v}" for k, v in sorted(counts.items(), key=lambda kv: -kv[1]))
    return f'<div class="counts">{head}</div><p>Flags raised: {flags or "none"}.</p>'


def _followup_table(followup: Sequence[Mapping]) -> str:
    if not followup:
        return "<p>No spectrum calls for follow-up.</p>"
    body = []
    for r in followup:
        link = f'<a href="#{_anchor(r)}">{_e(_star_name(r))}</a>'
        body.append(
            f"<tr>{_td_num(r['followup_rank'], '.0f')}<td>{link}</td><td>{_e(r.get('sptype'))}"
            f"</td>{_td_num(r.get('rv'), '+.1f')}{_td_num(r['followup_score'], '.2f')}"
            f"<td>{_e(r.get('followup_reason'))}</td></tr>")
    return ('<table class="sortable" id="followup"><thead><tr><th>rank</th><th>star</th>'
            "<th>type</th><th>rv [km/s]</th><th>score</th><th>why</th></tr></thead><tbody>"
            + "".join(body) + "</tbody></table>")


_ALL_COLUMNS = ("star", "file", "status", "type", "Teff [K]", "log g", "v sin i [km/s]",
                "rv [km/s]", "rv err", "frame", "S/N", "catalogue type", "flags", "rank")


def _all_table(rows: Sequence[Mapping]) -> str:
    body = []
    for r in rows:
        name = f'<a href="#{_anchor(r)}">{_e(_star_name(r))}</a>'
        cls = "spectrum failed" if r["status"] == "failed" else "spectrum"
        rank = r.get("followup_rank") or ""
        body.append(
            f'<tr class="{cls}"><td>{name}</td><td>{_e(os.path.basename(str(r["file"])))}</td>'
            f"<td>{_e(r['status'])}</td><td data-sort=\"{_num(r.get('subtype'), '.2f') or 99}\">"
            f"{_e(r.get('sptype'))}</td>{_td_num(_rounded(r.get('teff'), 100.0), '.0f')}"
            f"{_td_num(r.get('logg'), '.2f')}{_td_text(vsini_text(r), r.get('vsini'))}"
            f"{_td_num(r.get('rv'), '+.1f')}{_td_num(r.get('rv_err'), '.1f')}"
            f"<td>{_e(r.get('rv_frame'))}</td>"
            f"{_td_num(r.get('snr'), '.0f')}<td>{_e(r.get('catalogue_type'))}</td>"
            f'<td class="flags">{_e(str(r.get("flags", "")).replace(",", ", "))}</td>'
            f'<td class="num" data-sort="{rank or 1e9}">{rank}</td></tr>')
    head = "".join(f"<th>{_e(c)}</th>" for c in _ALL_COLUMNS)
    return (f'<table class="sortable" id="all-spectra"><thead><tr>{head}</tr></thead><tbody>'
            + "".join(body) + "</tbody></table>")


def _failures(rows: Sequence[Mapping], ignored: Sequence[str], night_dir: str | None) -> str:
    failed = [r for r in rows if r["status"] == "failed"]
    noted = [r for r in rows if r["status"] == "ok" and r.get("notes")]
    parts = []
    if failed:
        parts.append("<table id=\"failures\"><thead><tr><th>file</th><th>part</th>"
                     "<th>cause</th></tr></thead><tbody>" + "".join(
                         f"<tr><td>{_e(os.path.basename(str(r['file'])))}</td>"
                         f"<td>{_e(r.get('label'))}</td><td>{_e(r.get('error'))}</td></tr>"
                         for r in failed) + "</tbody></table>")
    else:
        parts.append("<p>No spectrum failed.</p>")
    if noted:
        parts.append("<p>Analysed with reservations:</p><ul>" + "".join(
            f"<li>{_e(_star_name(r))}: {_e(r['notes'])}</li>" for r in noted) + "</ul>")
    if ignored:
        rel = [os.path.relpath(p, night_dir) if night_dir else p for p in ignored]
        parts.append("<p>Files not taken as spectra (by name): "
                     + ", ".join(_e(p) for p in rel) + ".</p>")
    return "".join(parts)


def _legend(rows: Sequence[Mapping] = ()) -> str:
    from starlines.flags import FLAGS, split_flags

    counts = Counter(f for r in rows for f in split_flags(r.get("flags", "")))
    return ("<table id=\"flag-legend\"><thead><tr><th>flag</th><th>meaning</th><th>rule</th>"
            "<th>follow-up weight</th><th>this night</th></tr></thead><tbody>" + "".join(
                f"<tr><td>{_e(f.name)}</td><td>{_e(f.description)}</td><td>{_e(f.rule)}</td>"
                f'<td class="num">{f.interest:g}</td><td class="num">{counts[f.name]}</td>'
                "</tr>" for f in FLAGS) + "</tbody></table>")


def night_plots(rows: Sequence[Mapping]) -> dict[str, bytes]:
    """The night-level plots as PNG bytes, by caption."""
    from starlines.flags import LOW_SNR, split_flags
    from starlines.plots import (
        figure_png,
        plot_snr,
        plot_type_distribution,
        plot_velocity_vs_subtype,
    )

    ok = [r for r in rows if r["status"] == "ok"]
    sub = [r.get("subtype", math.nan) for r in ok]
    out = {"Distribution of provisional types": figure_png(plot_type_distribution(sub))}
    outl = ["velocity-outlier" in split_flags(r.get("flags", "")) for r in ok]
    out["Radial velocity against type (red: velocity outliers)"] = figure_png(
        plot_velocity_vs_subtype(sub, [r.get("rv", math.nan) for r in ok],
                                 [r.get("rv_err", math.nan) for r in ok], flagged=outl))
    out[f"S/N per spectrum (dashed: low-S/N threshold {LOW_SNR:g})"] = figure_png(
        plot_snr([_star_name(r) for r in ok], [r.get("snr", math.nan) for r in ok],
                 threshold=LOW_SNR))
    return out


def render_report(result, *, night_dir: str | None = None, figure_dir: str | None = None,
                  plots: Mapping[str, bytes] | None = None) -> str:
    """The report as one HTML string.

    Parameters
    ----------
    result : starlines.triage.TriageResult
        Rows, line rows, follow-up list and ignored files of the night.
    night_dir : str, optional
        Night folder (shown in the title; ignored files are shown relative to it).
    figure_dir : str, optional
        Folder of the per-spectrum PNGs to embed.
    plots : mapping of str to bytes, optional
        Night-level plots; :func:`night_plots` by default.
    """
    from starlines.report_stars import star_sections

    rows, followup = result.rows, result.followup
    plots = night_plots(rows) if plots is None else plots
    title = f"Night report: {os.path.basename(night_dir.rstrip(os.sep)) if night_dir else ''}"
    when = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    plot_html = "".join(f"<figure>{_img(png, cap, 'night')}<figcaption>{_e(cap)}"
                        "</figcaption></figure>" for cap, png in plots.items())
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>"
        f"<h1>{_e(title)}</h1><p>Made by starlines on {when}; "
        f"{_e(night_dir or '')}</p>"
        '<p class="note"><b>Automated types are provisional.</b> They come from measured '
        "line ratios and a model trained on synthetic spectra; check every type you use "
        "against the spectrum.</p>"
        f"<h2>Summary</h2>{_summary(rows, followup, result.ignored)}"
        f"<h2>Follow-up list</h2><p>Score = scientific interest (sum of flag weights) x "
        f"confidence (S/N and classification certainty).</p>{_followup_table(followup)}"
        f"<h2>All spectra</h2><p>Click a column header to sort.</p>{_all_table(rows)}"
        f'<h2>Night plots</h2><div class="plots">{plot_html}</div>'
        f"<h2>Failures</h2>{_failures(rows, result.ignored, night_dir)}"
        f"<h2>Flags</h2>{_legend(rows)}"
        f"<h2>Spectra</h2>{star_sections(rows, result.lines, figure_dir)}"
        f"<script>{_JS}</script></body></html>\n"
    )


def write_report(result, path: str, *, night_dir: str | None = None,
                 figure_dir: str | None = None) -> str:
    """Write :func:`render_report` to ``path``; return ``path``."""
    text = render_report(result, night_dir=night_dir, figure_dir=figure_dir)
    tmp = path + ".tmp"
    with open(tmp, "w", encoding="utf-8") as fh:
        fh.write(text)
    os.replace(tmp, path)
    return path
