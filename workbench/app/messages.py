"""Messages for people: library and parser messages rewritten for the page, shown as plain text.

The library's messages are written for the command line and for programmers;
the page rewrites the few that name parser internals or command-line flags,
and escapes markdown so that a user's own text (a pattern such as ``cm_*``, a
column called ``__id__``) is shown as typed.
"""

from __future__ import annotations

import re

# (pattern, replacement): parser internals and command-line wording -> words for the page
REWRITES = (
    (re.compile(r"\(?\s*Error tokenizing data\.\s*C error:\s*EOF inside string[^)]*\)?", re.I),
    "(a quotation mark is opened and never closed; check the file for a stray \" character)"),
    (re.compile(r"\(?\s*Error tokenizing data\.\s*C error:\s*Expected (\d+) fields in line (\d+), saw (\d+)\)?",
                re.I),
     r"(row \2 has \3 values where the header has \1 columns; check that row for an extra separator)"),
    (re.compile(r"\(?\s*(?:Error tokenizing data\.\s*)?C error:[^)]*\)?", re.I),
     "(the file could not be split into columns; save it again as CSV from the spreadsheet program)"),
    (re.compile(r"\(?'?[\w-]+'? codec can't decode byte 0x[0-9a-f]{2} in position \d+:[^)]*\)?", re.I),
     "(the file is not plain text in UTF-8: save it as 'CSV UTF-8' or upload the Excel file itself)"),
    (re.compile(r"--event-codes?"), "'Values meaning the event happened' on the Data page"),
    (re.compile(r"--censor-codes?"), "'Values meaning censored' on the Data page"),
    (re.compile(r"--time-unit"), "'Time unit' on the Data page"),
    (re.compile(r"--replicates"), "the replicates on the Results page"),
    (re.compile(r"\bcomplete_case\b"), "complete cases only"),
)

# characters that start markdown formatting; "_" only at a word's edge (snake_case stays as it is)
MARKDOWN = re.compile(r"([\\`*\[\]<>#~$|]|(?<![A-Za-z0-9])_|_(?![A-Za-z0-9]))")


def for_people(text: str) -> str:
    """``text`` with parser internals and command-line flags replaced by words the page uses."""
    out = str(text)
    for pattern, repl in REWRITES:
        out = pattern.sub(repl, out)
    return out


def plain(text: str) -> str:
    """``text`` escaped so that Streamlit's markdown shows it exactly as written."""
    return MARKDOWN.sub(r"\\\1", str(text)).replace("\n", "  \n")
