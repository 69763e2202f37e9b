"""The resume journal of a night: one JSON line per finished file.

Each record holds the file's key (absolute path, size, modification time in ns and the
fingerprint of the analysis options, :meth:`starlines.pipeline.AnalysisOptions.
fingerprint`), its result rows, line rows and checksum. Records are appended, flushed and
fsynced one by one, so a killed run loses no finished file; a torn last line is skipped.
Version 2 (the options in the key) ignores version-1 records, which are analysed again.
"""

from __future__ import annotations

import json
import logging
import os

from starlines.pipeline import FileResult

__all__ = ["Journal", "reusable", "JOURNAL_VERSION"]

log = logging.getLogger("starlines.triage")

#: Version of the records (2: the key holds the options fingerprint).
JOURNAL_VERSION = 2


class Journal:
    """Append-only JSON-lines record of finished files (see the module docstring)."""

    def __init__(self, out_dir: str):
        self.folder = os.path.join(out_dir, ".journal")
        self.path = os.path.join(self.folder, "files.jsonl")

    def reset(self) -> None:
        """Forget every finished file."""
        if os.path.exists(self.path):
            os.remove(self.path)

    def load(self) -> dict[str, dict]:
        """Latest record per absolute path; a torn last line (killed run) is skipped."""
        records: dict[str, dict] = {}
        if not os.path.exists(self.path):
            return records
        with open(self.path, encoding="utf-8") as fh:
            for text in fh:
                try:
                    rec = json.loads(text)
                except json.JSONDecodeError:
                    log.warning("journal %s: skipping an unfinished line", self.path)
                    continue
                if rec.get("version") == JOURNAL_VERSION:
                    records[rec["key"]["path"]] = rec
        return records

    def append(self, result: FileResult) -> dict:
        """Record a finished file durably; return the record."""
        os.makedirs(self.folder, exist_ok=True)
        rec = {"version": JOURNAL_VERSION, "key": result.key, "rows": result.rows,
               "lines": result.lines, "line_units": result.line_units,
               "seconds": result.seconds, "checksum": result.checksum}
        text = json.dumps(rec, default=_json_default) + "\n"
        with open(self.path, "a", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        return rec


def _json_default(value):
    if hasattr(value, "item"):
        return value.item()
    if hasattr(value, "tolist"):
        return value.tolist()
    return str(value)


def reusable(rec: dict | None, key: dict, figure_dir: str | None) -> bool:
    """Whether a journal record stands for ``key`` (same file version and options) and,
    when figures are wanted, its figures exist in ``figure_dir``."""
    if rec is None or rec["key"] != key:
        return False
    if figure_dir:
        for row in rec["rows"]:
            if row["status"] == "ok" and not (
                row.get("figure") and os.path.exists(os.path.join(figure_dir, row["figure"]))
            ):
                return False
    return True
