#!/usr/bin/python3
"""Parses the tables of Markdown files with Python-Markdown (Debian python3-markdown) and reports
whether every row has as many cells as its header.

Usage: report_markdown.py FILE.md...
A table row is split into cells by Python-Markdown's own tables extension (TableProcessor._split_row:
'|' separates cells unless escaped as '\\|' or inside a code span); the table must also render as
an HTML <table> with that many header cells. Prints JSON: files, tables, rows, bad (a list of
"file:line: N cells, header has M"), rendered_tables. Exits 1 when a row is bad.
"""
import json
import re
import sys
from html.parser import HTMLParser

import markdown
from markdown.extensions.tables import TableProcessor


class Counter(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tables = []  # per table: header cell count
        self.in_head = False

    def handle_starttag(self, tag, attrs):
        if tag == "table":
            self.tables.append(0)
        elif tag == "thead":
            self.in_head = True
        elif tag == "th" and self.in_head:
            self.tables[-1] += 1

    def handle_endtag(self, tag):
        if tag == "thead":
            self.in_head = False


def main():
    md = markdown.Markdown(extensions=["tables"])
    splitter = TableProcessor(md.parser, {"use_align_attribute": False})
    splitter.border = True  # rows start and end with a pipe, as ours do
    out = {"files": 0, "tables": 0, "rows": 0, "bad": [], "rendered_tables": 0, "header_cells": []}
    for path in sys.argv[1:]:
        text = open(path, encoding="utf-8").read()
        out["files"] += 1
        lines = text.split("\n")
        i = 0
        while i < len(lines):
            # A table: a header row, a delimiter row of dashes, then rows, all starting with '|'.
            if lines[i].startswith("|") and i + 1 < len(lines) and re.match(r"^\|[\s:|-]+\|\s*$", lines[i + 1]):
                header = len(splitter._split_row(lines[i]))
                out["tables"] += 1
                out["header_cells"].append(header)
                j = i + 2
                while j < len(lines) and lines[j].startswith("|"):
                    n = len(splitter._split_row(lines[j]))
                    out["rows"] += 1
                    if n != header:
                        out["bad"].append("%s:%d: %d cells, header has %d" % (path, j + 1, n, header))
                    j += 1
                i = j
            else:
                i += 1
        c = Counter()
        c.feed(md.reset().convert(text))
        out["rendered_tables"] += len(c.tables)
    print(json.dumps(out))
    return 1 if out["bad"] else 0


if __name__ == "__main__":
    sys.exit(main())
