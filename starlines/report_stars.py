"""The per-spectrum sections of the night report (:mod:`starlines.report`).

One ``<section class="star">`` per result row, with the id the report's tables link to:
the values with sensible precision (see :mod:`starlines.report`), every flag with its
meaning, the notes (reservations, upper limits, suspect data), the lines measured and the
figure when one was made.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence

from starlines.report import _anchor, _e, _img, _num, _star_name, teff_text, vsini_text

__all__ = ["star_sections", "LINE_STATUSES_SHOWN"]

#: Line rows shown in a star's section (others: outside the range, masked).
LINE_STATUSES_SHOWN = ("measured", "not detected", "blended")


def _pm(value, err, fmt: str, unit: str = "") -> str:
    text = _num(value, fmt)
    if not text:
        return ""
    e = _num(err, fmt.lstrip("+"))
    return f"{text} &plusmn; {e}{unit}" if e else f"{text}{unit}"


def _teff(row: Mapping) -> str:
    text = teff_text(row.get("teff"))
    if not text:
        return ""
    err = teff_text(row.get("teff_err"))
    return f"{text} &plusmn; {err} K" if err else f"{text} K"


def _velocity(row: Mapping) -> str:
    rv = _pm(row.get("rv"), row.get("rv_err"), "+.1f", " km/s")
    if not rv:
        return ""
    parts = [rv]
    if _num(row.get("rv_n_lines"), ".0f"):
        parts.append(f"{_num(row.get('rv_n_lines'), '.0f')} lines")
    if row.get("rv_frame"):
        parts.append(_e(row["rv_frame"]))
    ccf = _pm(row.get("rv_ccf"), row.get("rv_ccf_err"), "+.1f", " km/s")
    text = f"{parts[0]} ({', '.join(parts[1:])})" if parts[1:] else parts[0]
    return text + (f"; cross-correlation {ccf}" if ccf else "")


def _values(row: Mapping) -> str:
    items = [
        ("type (provisional)", _e(row.get("sptype"))),
        ("catalogue type", _e(row.get("catalogue_type"))),
        ("Teff", _teff(row)),
        ("log g", _pm(row.get("logg"), row.get("logg_err"), ".2f", " dex")),
        ("He/H by number", _pm(row.get("he_abundance"), row.get("he_abundance_err"), ".2f")),
        ("v sin i", (vsini_text(row) + " km/s") if vsini_text(row) else ""),
        ("radial velocity", _velocity(row)),
        ("second component", _pm(row.get("rv2"), None, "+.1f", " km/s")),
        ("S/N per pixel", _num(row.get("snr"), ".0f")
         + (f" (continuum scatter: {_num(row.get('snr_continuum'), '.0f')})"
            if _num(row.get("snr_continuum"), ".0f") else "")),
        ("medium", _e(row.get("medium")) + (" (assumed)" if row.get("medium_assumed") else "")),
        ("follow-up", f"rank {row['followup_rank']}: {_e(row.get('followup_reason'))}"
         if row.get("followup_rank") else ""),
        ("error", _e(row.get("error"))),
    ]
    body = "".join(f"<dt>{_e(k)}</dt><dd>{v}</dd>" for k, v in items if v)
    return f'<dl class="values">{body}</dl>'


def _flags(row: Mapping) -> str:
    from starlines.flags import flag, split_flags

    names = split_flags(row.get("flags", ""))
    if not names:
        return "<p>No flags.</p>"
    items = []
    for name in names:
        try:
            items.append(f"<li><b>{_e(name)}</b>: {_e(flag(name).description)}</li>")
        except KeyError:
            items.append(f"<li><b>{_e(name)}</b></li>")
    return '<ul class="flags">' + "".join(items) + "</ul>"


def _notes(row: Mapping) -> str:
    parts = []
    for key, title in (("notes", "Notes"), ("class_notes", "Classification notes")):
        notes = [n for n in str(row.get(key) or "").split("; ") if n.strip()]
        if notes:
            parts.append(f"<p>{title}:</p><ul>"
                         + "".join(f"<li>{_e(n)}</li>" for n in notes) + "</ul>")
    return "".join(parts)


def _lines_table(lines: Sequence[Mapping]) -> str:
    shown = [ln for ln in lines if ln.get("status") in LINE_STATUSES_SHOWN]
    if not shown:
        return ""
    body = []
    for ln in sorted(shown, key=lambda x: float(x.get("wavelength_air") or math.inf)):
        ew = _pm(ln.get("ew"), ln.get("ew_err"), ".2f")
        body.append(
            f"<tr><td>{_e(ln.get('line'))}</td><td class=\"num\">"
            f"{_num(ln.get('wavelength_air'), '.2f')}</td><td class=\"num\">{ew}</td>"
            f"<td class=\"num\">{_num(ln.get('rv'), '+.1f')}</td>"
            f"<td class=\"num\">{_num(ln.get('fwhm'), '.2f')}</td>"
            f"<td>{_e(ln.get('status'))}{' (emission)' if ln.get('emission') else ''}</td>"
            "</tr>")
    return ('<details><summary>Lines (EW in Angstrom, absorption positive)</summary>'
            '<table class="lines"><thead><tr><th>line</th><th>air wavelength [A]</th>'
            "<th>EW [A]</th><th>rv [km/s]</th><th>FWHM [A]</th><th>status</th></tr></thead>"
            "<tbody>" + "".join(body) + "</tbody></table></details>")


def _figure(row: Mapping, figure_dir: str | None) -> str:
    if not figure_dir or not row.get("figure"):
        return ""
    path = os.path.join(figure_dir, str(row["figure"]))
    if not os.path.isfile(path):
        return ""
    with open(path, "rb") as fh:
        png = fh.read()
    return (f"<figure>{_img(png, _star_name(row), 'star')}<figcaption>{_e(_star_name(row))}"
            f": {_e(row.get('sptype'))} (provisional)</figcaption></figure>")


def star_sections(rows: Sequence[Mapping], lines: Sequence[Mapping],
                  figure_dir: str | None) -> str:
    """HTML of one section per result row (see the module docstring)."""
    by_spec: dict[tuple, list] = {}
    for ln in lines:
        by_spec.setdefault((ln.get("file"), ln.get("label")), []).append(ln)
    parts = [] if figure_dir else ["<p>Figures were not made for this run.</p>"]
    for r in rows:
        title = _e(_star_name(r)) + (" &mdash; failed" if r["status"] == "failed" else "")
        parts.append(
            f'<section class="star" id="{_anchor(r)}"><h3>{title}</h3>'
            f"<p>{_e(os.path.basename(str(r['file'])))}</p>{_values(r)}{_flags(r)}"
            f"{_notes(r)}{_lines_table(by_spec.get((r['file'], r['label']), []))}"
            f"{_figure(r, figure_dir)}</section>")
    return '<div class="stars">' + "".join(parts) + "</div>"
