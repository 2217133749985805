#!/usr/bin/python3
"""Well-formedness of the SVG in an HTML page, with Python's own XML parser (xml.etree.ElementTree).

Usage: report_xml.py PAGE.html
Extracts every <svg ...>...</svg> element (they do not nest in our pages) and parses each as XML.
Prints JSON: svg_count, the number that parse, the root tags, the first errors, and the
relative src of every <img> and href of every <a> (for the caller to check), then exits 1 if any
SVG is not well-formed XML or is not in the SVG namespace.
"""
import json
import re
import sys
import xml.etree.ElementTree as ET

SVG_NS = "{http://www.w3.org/2000/svg}svg"


def main():
    with open(sys.argv[1], encoding="utf-8") as f:
        page = f.read()
    blocks = re.findall(r"<svg\b.*?</svg>", page, flags=re.S)
    ok, errors, roots = 0, [], set()
    for i, b in enumerate(blocks):
        try:
            root = ET.fromstring(b)
            roots.add(root.tag)
            if root.tag == SVG_NS:
                ok += 1
            else:
                errors.append("svg %d: root tag %s" % (i, root.tag))
        except ET.ParseError as e:
            errors.append("svg %d: %s" % (i, e))
    out = {
        "svg_count": len(blocks),
        "svg_ok": ok,
        "roots": sorted(roots),
        "errors": errors[:5],
        "img_src": re.findall(r'<img\b[^>]*\bsrc="([^"]*)"', page),
        "a_href": re.findall(r'<a\b[^>]*\bhref="([^"]*)"', page),
    }
    print(json.dumps(out))
    sys.exit(0 if ok == len(blocks) else 1)


if __name__ == "__main__":
    main()
