# SPDX-License-Identifier: GPL-3.0-or-later
"""The report page against html5lib (Debian's python3-html5lib), a parser
that implements the WHATWG HTML parsing algorithm: in strict mode it
raises on any parse error the specification defines.  The demo report and
one with hostile zone and band names (<b>&"docklands and
</svg><script>x()</script>) must parse without a single error, and the
hostile names must come out as text of the right elements (no <b> or
<script> element anywhere in the tree)."""
import csv
import os
import subprocess
import tempfile

from refutil import etacal, need

html5lib = need("html5lib", "python3-html5lib")

work = tempfile.mkdtemp(prefix="etacal-html5-")
ETACAL = os.path.abspath(etacal())
citygen = os.path.join(os.path.dirname(ETACAL), "citygen")


def sh(args):
    p = subprocess.run(args, cwd=work, capture_output=True, text=True)
    if p.returncode != 0:
        raise SystemExit(f"{args[0]} failed ({p.returncode}): {p.stderr}")


sh([citygen, "--seed", "2026", "--rows", "20000", "--fresh-rows", "10", "--cal", "cal.csv", "--fresh", "f.csv"])
rows = list(csv.reader(open(os.path.join(work, "cal.csv"), newline="")))
zi, bi = rows[0].index("zone"), rows[0].index("band")
ZONE, BAND = '<b>&"docklands', "</svg><script>x()</script>"
with open(os.path.join(work, "h.csv"), "w", newline="") as f:
    w = csv.writer(f, lineterminator="\n")
    w.writerow(rows[0])
    for r in rows[1:]:
        r[zi] = ZONE if r[zi] == "docklands" else r[zi]
        r[bi] = BAND if r[bi] == "dinner" else r[bi]
        w.writerow(r)
checked = 0
for src, extra in (("cal.csv", []), ("h.csv", ["--title", "<i>Q&A</i>"])):
    out = src.replace(".csv", ".html")
    sh([ETACAL, "report", src, "--actual", "actual_s", "--pred", "pred_s", "--by", "zone,band", "--time",
        "placed_at", "--window", "14d", "-o", out, *extra])
    doc = open(os.path.join(work, out), "rb").read()
    parser = html5lib.HTMLParser(strict=True, namespaceHTMLElements=False)
    try:
        tree = parser.parse(doc)
    except Exception as e:  # html5lib raises ParseError in strict mode
        raise SystemExit(f"{out}: not valid HTML per html5lib: {e} {parser.errors[:3]}")
    tags = {el.tag for el in tree.iter()}
    if {"b", "i", "script"} & tags:
        raise SystemExit(f"{out}: markup from the data: {sorted({'b', 'i', 'script'} & tags)}")
    if src == "h.csv":
        text = "".join(tree.itertext())
        if ZONE not in text or BAND not in text or "<i>Q&A</i>" not in text:
            raise SystemExit("the hostile names are not in the page's text")
    checked += 1
subprocess.run(["rm", "-rf", work])
print(f"{checked} report pages parse without error by html5lib's WHATWG parser (strict), hostile names as text")
