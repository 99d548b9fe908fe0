"""Free text made safe for the medium it is written to: one function per medium.

Names and sources from users' files (the lineup's name, stage, carrier, band and
rule names, rule-set titles and sources, notes that quote them) are data: they
are kept as typed in the library, in JSON and in the HTML report (``html.escape``),
and escaped only where they are written:

- :func:`terminal` for stdout and stderr (tables, verdict lines, notes, errors);
  :class:`TerminalStream` applies it to everything the command line prints;
- :func:`markdown` for the Markdown report and its tables;
- :func:`csv_cell` for CSV cells (spreadsheet formulas);
- :func:`plot_text` for matplotlib labels and titles (mathtext).

JSON needs nothing here: ``json.dumps`` with ``ensure_ascii=True`` (its default,
used by :func:`spurplan.output.formatting.to_json`) writes every control, format and
non-ASCII character as a ``\\uXXXX`` escape (RFC 8259, section 7, from memory).
"""

from __future__ import annotations

import contextlib
import io
import re
import sys
import unicodedata

# Characters that can move the cursor, rewrite or recolour the screen, ring the bell,
# or hide and reorder text when shown: C0 and C1 controls and DEL (category Cc; ECMA-48
# escape and control sequences start with ESC 0x1B or a C1 control such as CSI 0x9B),
# format characters (Cf: the bidirectional embeddings, overrides and isolates
# U+202A-U+202E and U+2066-U+2069 of the "Trojan Source" attack, CVE-2021-42574, and the
# zero-width characters and tag characters that hide text, from memory), line and
# paragraph separators (Zl, Zp) and lone surrogates (Cs, from undecodable file names),
# which a terminal cannot even encode.  Unicode categories per the Unicode Character
# Database (unicodedata, Python library documentation).
_UNSAFE_CATEGORIES = frozenset({"Cc", "Cf", "Zl", "Zp", "Cs"})


def _unsafe(ch: str) -> bool:
    return unicodedata.category(ch) in _UNSAFE_CATEGORIES


def _visible(ch: str) -> str:
    r"""``ch`` as Python writes it in a string literal: ``\x1b``, ``\r``, ``\u202e``."""
    return ch.encode("unicode_escape", "backslashreplace").decode("ascii")


# Candidates for a look-up: anything outside printable ASCII (plain ASCII text, the
# usual case, goes through one regular-expression scan and nothing else).
_CANDIDATE = re.compile(r"[^\x20-\x7e]")
_CANDIDATE_KEEP_LF = re.compile(r"[^\x20-\x7e\n]")


def _fix(match: re.Match) -> str:
    ch = match.group()
    return _visible(ch) if _unsafe(ch) else ch


def terminal(text, *, keep_newlines: bool = False) -> str:
    r"""``text`` with every character that could act on a terminal made visible.

    Control characters (C0, DEL, C1, ESC sequences, CR, backspace, BEL), Unicode
    format characters (bidi overrides and isolates U+202A-U+202E, U+2066-U+2069, marks,
    zero-width characters), line and paragraph separators and lone surrogates are
    written as their escapes (``\x1b``, ``\r``, ``\u202e``), so that a hostile name
    can neither act on the terminal nor hide what it is.  Other text, letters of any
    script included, is unchanged.

    Parameters
    ----------
    text : object
        The text (``str()`` is applied).
    keep_newlines : bool
        Keep LF, for whole output lines whose line breaks are the program's own.
        Single values (table cells, names) are always passed without it.

    Returns
    -------
    str
    """
    return (_CANDIDATE_KEEP_LF if keep_newlines else _CANDIDATE).sub(_fix, str(text))


class TerminalStream(io.TextIOBase):
    """A text stream that passes :func:`terminal` (newlines kept) over all it writes.

    The command line installs it over ``sys.stdout`` and ``sys.stderr`` for the run
    (``spurplan.cli``), so that every line it prints is safe, wherever the text came
    from.  ``raw`` is the stream beneath, for the progress bar, which writes its own
    carriage returns and cursor codes.
    """

    def __init__(self, raw):
        self.raw = raw

    def write(self, text: str) -> int:
        if not isinstance(text, str):
            # click probes text streams with b"": a TypeError says this one is text only.
            raise TypeError(f"write() argument must be str, not {type(text).__name__}")
        self.raw.write(terminal(text, keep_newlines=True))
        return len(text)

    def flush(self) -> None:
        self.raw.flush()

    def writable(self) -> bool:
        return True

    def close(self) -> None:
        # The stream beneath belongs to the caller: releasing this wrapper leaves it open.
        pass

    def isatty(self) -> bool:
        return self.raw.isatty()

    def fileno(self) -> int:
        return self.raw.fileno()

    # Read-only views of the wrapped stream's settings (a TextIO declares them as
    # attributes; this wrapper never lets them be set).
    @property
    def encoding(self):  # type: ignore[override]
        return getattr(self.raw, "encoding", None)

    @property
    def errors(self):  # type: ignore[override]
        return getattr(self.raw, "errors", None)


def raw_stream(stream):
    """The stream beneath a :class:`TerminalStream` (``stream`` itself otherwise)."""
    return stream.raw if isinstance(stream, TerminalStream) else stream


@contextlib.contextmanager
def terminal_streams():
    """Put :class:`TerminalStream` over ``sys.stdout`` and ``sys.stderr`` for a block.

    The streams are looked up when the block starts (a test runner's capture is
    wrapped, not bypassed) and restored when it ends, however it ends.
    """
    saved = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = (
        s if s is None or isinstance(s, TerminalStream) else TerminalStream(s) for s in saved
    )
    try:
        yield
    finally:
        sys.stdout, sys.stderr = saved


# --- Markdown ---------------------------------------------------------------------------------

# HTML-significant characters become entities, which every Markdown flavour decodes as
# text (CommonMark 0.31, section 2.5; Python-Markdown does not backslash-escape '<', from
# memory).
_HTML = {"&": "&amp;", "<": "&lt;", ">": "&gt;"}
# Inline syntax, backslash-escaped (CommonMark 0.31, section 2.4: any ASCII punctuation
# may be): links and images need '[' and ']'; emphasis '*' '_', strikethrough '~', code
# spans '`', tables '|' (GitHub Flavored Markdown 0.29, section 4.10), math '$' (GitHub),
# attribute lists '{' '}' (kramdown), and the backslash itself.
_MD_INLINE = set("\\`*_[]|~${}")
_MD_TABLE = str.maketrans({**{ch: "\\" + ch for ch in _MD_INLINE}, **_HTML})
# Block syntax counts only at the start of a line (CommonMark 0.31, sections 4 and 5):
# a list item ("- ", "+ ", "1. ", "1) "), an ATX heading ("# "), a thematic break or
# setext underline (a run of "-" or "=").  '*', '_' and '>' are escaped above, and
# leading white space is removed.
_MD_MARKER = re.compile(r"^(?:[-+]|#{1,6})(?=\s|$)|^([-=])\1*\s*$")
_MD_ORDERED = re.compile(r"^\d{1,9}(?=[.)](?:\s|$))")
_LINE_BREAKS = re.compile(r"[\r\n\v\f\x1c-\x1e\x85\u2028\u2029]+")


def markdown(text) -> str:
    r"""``text`` as literal Markdown inline text: no markup, link, image or table break.

    Line breaks become spaces (a value stays in its paragraph or table cell) and
    leading and trailing white space goes (it could start an indented code block or
    end in a hard line break), other unsafe characters are made visible as in
    :func:`terminal`, ``& < >`` become
    entities (so ``<script>``, ``<img onerror=...>`` and ``<iframe>`` are text), and
    Markdown punctuation is backslash-escaped (so ``![x](http://...)`` and
    ``[a](javascript:...)`` are text, and ``|`` cannot end a table cell).  Rendered,
    the result reads as ``text`` (its line breaks as spaces, its controls as escapes).

    Parameters
    ----------
    text : object
        The text (``str()`` is applied).
    """
    text = terminal(_LINE_BREAKS.sub(" ", str(text)).strip(" \t"))
    out = text.translate(_MD_TABLE)
    if _MD_MARKER.match(out):
        return "\\" + out
    ordered = _MD_ORDERED.match(out)
    if ordered:
        return out[: ordered.end()] + "\\" + out[ordered.end() :]
    return out


# --- CSV --------------------------------------------------------------------------------------

# A cell that starts with one of these is read as a formula by spreadsheet programs
# (OWASP, "CSV Injection", from memory); a text cell that does gets a leading quote.
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
# Text that is only numbers (one, or a space-separated mixing vector such as "-1 2"):
# a spreadsheet reads it as a number or an error, never as a call, so it is left alone.
_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_NUMBERS = re.compile(rf"{_NUMBER}(?: +{_NUMBER})*")


def csv_cell(value):
    """A CSV cell value with spreadsheet formulas neutralised.

    Numbers (``int``, ``float``, ``bool``) are returned unchanged, so numeric columns
    stay numbers (a level of -13.5 is written -13.5).  A text cell that starts with
    ``=``, ``+``, ``-``, ``@``, tab or carriage return and is not a number gets a
    leading single quote (``'=HYPERLINK(...)``), which spreadsheets show as text.
    """
    if isinstance(value, str) and value.startswith(FORMULA_STARTS) and not _NUMBERS.fullmatch(value):
        return "'" + value
    return value


# --- matplotlib -------------------------------------------------------------------------------


# Longest name drawn whole in a figure; a longer one ends in an ellipsis.  A title is one
# line, and constrained layout gives up (axes of zero size) once a title is wider than
# the figure: 60 characters of a 7 to 9 point font fit the narrowest figure (200 px).
PLOT_NAME_CHARS = 60


def plot_text(text, max_chars: int | None = PLOT_NAME_CHARS) -> str:
    r"""A name drawn literally by matplotlib: no mathtext, no missing glyphs, bounded length.

    matplotlib parses a string as mathtext when it holds an even number of unescaped
    ``$``, and draws ``\$`` as ``$`` (matplotlib documentation, "Writing mathematical
    expressions"; ``cbook.is_math_text``).  Escaping every ``$`` therefore keeps the
    whole string plain text, where a backslash is drawn as itself, so backslashes need
    no escape of their own.  Control and format characters, which no font draws, are
    made visible as in :func:`terminal`.

    Parameters
    ----------
    text : object
        The name (``str()`` is applied).
    max_chars : int or None
        Names longer than this (after making controls visible) are cut and end in
        an ellipsis; ``None`` keeps them whole.

    Returns
    -------
    str
        The text with ``$`` escaped, at most ``max_chars`` characters.
    """
    text = terminal(text)
    if max_chars is not None and len(text) > max_chars:
        text = text[: max_chars - 1] + "\u2026"
    return text.replace("$", r"\$")
