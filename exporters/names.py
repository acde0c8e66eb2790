"""Neutralising user-chosen text for every output format.

A design name (up to 80 characters, any characters) and op-amp fields from a request or an
approved-parts file are labels, never content. Each format gets one function:

* :func:`safe_filename`: the download name; keeps ``[A-Za-z0-9._-]``, every other character
  becomes ``-``, leading ``.`` and ``-`` dropped, cut to 64 characters, ``gainchain-design``
  when empty.
* :func:`cell_text`: CSV and xlsx cells. OWASP's CSV-injection guidance: a cell that starts
  with ``=``, ``+``, ``-``, ``@``, tab or carriage return may be run as a formula by a
  spreadsheet, so such cells get a leading apostrophe. Tabs and line breaks are removed first
  (KiCad's BOM export strips them too), so nothing hides behind them.
* :func:`spice_title`: one line of ``[A-Za-z0-9 _.,:+=/-]`` (a conservative set, common
  practice) that
  starts with a letter or digit, so it cannot start a control line (``.``), a continuation
  (``+``) or an ngspice warning (``=``), nor carry a newline.
* :func:`sx`: the one S-expression string escaper (KiCad's S-expression lexer rules, KiCad
  file-format documentation).
"""

from __future__ import annotations

import re

DEFAULT_NAME = "gainchain-design"
MAX_FILENAME_CHARS = 64
_FORMULA_LEADS = ("=", "+", "-", "@", "\t", "\r")


def safe_filename(name: str | None) -> str:
    """``"Rx amp (v2)"`` -> ``"Rx-amp--v2-"``; empty -> ``gainchain-design``.

    Leading ``.`` and ``-`` are dropped: a name starting with a dot is a hidden file on Unix,
    and one starting with a dash reads as an option to the command that gets it
    (``rm -rf.csv``); common practice for downloaded file names.
    """
    kept = re.sub(r"[^A-Za-z0-9._-]", "-", name or "").lstrip(".-")[:MAX_FILENAME_CHARS]
    return kept or DEFAULT_NAME


def cell_text(value: str | None) -> str:
    """Spreadsheet-inert CSV text: line breaks and tabs removed, formula leads quoted."""
    text = sheet_text(value)
    if is_formula_lead(text):
        text = "'" + text
    return text


def sheet_text(value: str | None) -> str:
    """Cell text without line breaks and tabs (no quote added: an xlsx cell is marked as
    text by its type and its quote-prefix style instead, so nothing shows)."""
    return re.sub(r"[\t\r\n]", "", xml_text(value))


def is_formula_lead(text: str) -> bool:
    """True when a spreadsheet could take ``text`` for a formula (OWASP CSV injection)."""
    return text.startswith(_FORMULA_LEADS)


def spice_title(value: str | None, default: str = "gainchain design") -> str:
    """A single safe line for a SPICE title or ``*`` comment (at most 80 characters)."""
    text = re.sub(r"[^A-Za-z0-9 _.,:+=/-]", "_", value or "")[:80].strip()
    # Start with a letter or digit: never a dot command or a continuation, and ngspice
    # warns about (and rewrites) titles that start with "=" and other punctuation.
    text = re.sub(r"^[^A-Za-z0-9]+", "", text)
    return text.strip() or default


def sx(value: str) -> str:
    """Quote one S-expression atom: escape ``\\``, ``"``, newline and CR inside quotes.

    Other C0 control characters (and DEL) are dropped: no reader needs them in a label.
    """
    text = _CONTROL.sub("", unicode_text(value))
    return '"' + (text.replace("\\", "\\\\").replace('"', '\\"')
                  .replace("\n", "\\n").replace("\r", "\\r")) + '"'


def xml_text(value: str | None) -> str:
    """Text that XML 1.0 can carry: C0 controls other than tab, LF and CR are dropped
    (ElementTree escapes ``& < > "`` itself, but writes forbidden characters raw)."""
    return _CONTROL.sub("", unicode_text(value))


def unicode_text(value) -> str:
    """``str(value)`` with lone surrogates (valid in JSON, not in UTF-8) replaced by ``?``."""
    text = "" if value is None else str(value)
    return text.encode("utf-8", "replace").decode("utf-8")


_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")
