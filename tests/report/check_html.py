# SPDX-License-Identifier: GPL-3.0-or-later
"""check_html.py ETACAL CITYGEN: the report page as a file.

Runs `etacal report` on seeded demo data (invented data: these are
behavioural checks, and the numbers are compared with the other etacal
commands on the same rows, not with an outside oracle) and checks:
  - the page parses as HTML (Python's html.parser, every element closed in
    order) and every inline <svg> part parses as XML (xml.etree);
  - it is self-contained: no script, no element that loads anything (img,
    link, iframe, object, embed), no src or href attribute, no URL, no url();
  - a zone called <b>&"docklands and a band called </svg><script>x()</script>
    come out as text, never as markup;
  - the same command gives the same bytes;
  - a report on ten times the rows is about the same size (within 15%);
  - its numbers are those of etacal fit --holdout (the quote table, the
    on-time rate reached), etacal curve (the cost table) and etacal
    backtest (the overall on-time rate, and the periods with an unbounded
    promise, drawn as their own markers) on the same data.
Prints one line per check; exits 1 on the first failure."""
import csv
import html.parser
import os
import re
import subprocess
import sys
import tempfile
import xml.etree.ElementTree as ET

ETACAL, CITYGEN = os.path.abspath(sys.argv[1]), os.path.abspath(sys.argv[2])
WORK = tempfile.mkdtemp(prefix="etacal-report-")
VOID = {"meta", "br", "hr", "img", "input", "link", "area", "base", "col", "embed", "source", "track", "wbr"}
# SVG elements written self-closed (<line .../>): html.parser reports them
# through handle_startendtag
# The elements a report may hold: text, tables and inline SVG drawing.  An
# allowlist, so that anything that runs or loads something (a script, an
# image, a frame, a media or link element) fails whatever its name.
ALLOWED = {"html", "head", "meta", "title", "style", "body", "main", "section", "div", "p", "h1", "h2", "h3",
           "span", "b", "i", "em", "strong", "code", "pre", "br", "ul", "ol", "li", "table", "thead", "tbody",
           "tfoot", "tr", "th", "td", "caption", "figure", "figcaption", "small", "abbr",
           "svg", "g", "line", "polyline", "polygon", "path", "rect", "circle", "text", "tspan", "desc"}


def run(args, cwd=WORK):
    p = subprocess.run(args, cwd=cwd, capture_output=True, text=True)
    if p.returncode != 0:
        raise SystemExit(f"FAIL: {' '.join(args)} exited {p.returncode}: {p.stderr}")
    return p.stdout


def ok(msg):
    print(f"ok: {msg}")


def fail(msg):
    raise SystemExit(f"FAIL: {msg}")


class Page(html.parser.HTMLParser):
    """Checks nesting and collects tags, attributes and text."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.tags, self.attrs, self.text = [], [], [], []
        self.errors = []
        self.tables = {}  # section id -> list of rows (lists of cell texts)
        self.section = None
        self.cell = None

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.extend(attrs)
        if tag == "section":
            self.section = dict(attrs).get("id")
        if tag == "tr":
            self.tables.setdefault(self.section, []).append([])
        if tag in ("td", "th"):
            self.cell = []
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.extend(attrs)

    def handle_endtag(self, tag):
        if tag in VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else 'nothing'}>")
            return
        self.stack.pop()
        if tag in ("td", "th") and self.cell is not None:
            self.tables[self.section][-1].append("".join(self.cell))
            self.cell = None

    def handle_data(self, data):
        self.text.append(data)
        if self.cell is not None:
            self.cell.append(data)


def check_page(path, what):
    doc = open(path, encoding="utf-8").read()
    if not doc.startswith("<!DOCTYPE html>\n"):
        fail(f"{what}: no HTML5 doctype")
    p = Page()
    p.feed(doc)
    p.close()
    if p.errors or p.stack:
        fail(f"{what}: badly nested: {p.errors[:3]} open at the end: {p.stack}")
    bad = set(p.tags) - ALLOWED
    if bad:
        fail(f"{what}: elements a self-contained report does not hold: {sorted(bad)}")
    for name, value in p.attrs:
        if name in ("src", "href", "srcset", "xlink:href", "action") or name.startswith("on"):
            fail(f"{what}: attribute {name}={value!r}")
    if re.search(r"https?:|url\(|@import|//[a-z]", doc, re.I):
        fail(f"{what}: a URL in the page: {re.search(r'.{20}(https?:|url[(]|@import|//[a-z]).{20}', doc, re.I)}")
    svgs = re.findall(r"<svg\b.*?</svg>", doc, re.S)
    if len(svgs) != doc.count("<svg ") or not svgs:
        fail(f"{what}: {len(svgs)} closed <svg> parts for {doc.count('<svg ')} opened")
    for s in svgs:
        try:
            ET.fromstring(s)
        except ET.ParseError as e:
            fail(f"{what}: an SVG part is not well-formed XML: {e}")
    return doc, p, len(svgs)


def report(csv_name, out, extra=(), cwd=WORK):
    run([ETACAL, "report", csv_name, "--actual", "actual_s", "--pred", "pred_s", "--by", "zone,band",
         "--time", "placed_at", "--window", "14d", "-o", out, *extra], cwd=cwd)
    return os.path.join(cwd, out)


run([CITYGEN, "--seed", "7", "--rows", "10000", "--fresh-rows", "10", "--cal", "s.csv", "--fresh", "sf.csv"])
run([CITYGEN, "--seed", "7", "--rows", "100000", "--fresh-rows", "10", "--cal", "l.csv", "--fresh", "lf.csv"])

# 1. the page parses, its SVG too, and it is self-contained
small = report("s.csv", "s.html")
doc, page, nsvg = check_page(small, "report")
ok(f"the page parses as HTML, its {nsvg} SVG parts as XML; no script, no URL, nothing loaded")

# 2. hostile names are text
rows = list(csv.reader(open(os.path.join(WORK, "s.csv"), newline="")))
zi, bi = rows[0].index("zone"), rows[0].index("band")
ZONE, BAND = '<b>&"docklands', "</svg><script>x()</script>"
with open(os.path.join(WORK, "h.csv"), "w", newline="") as f:
    w = csv.writer(f, lineterminator="\n")
    w.writerow(rows[0])
    for r in rows[1:]:
        r[zi] = ZONE if r[zi] == "docklands" else r[zi]
        r[bi] = BAND if r[bi] == "dinner" else r[bi]
        w.writerow(r)
hostile = report("h.csv", "h.html", ["--title", "<i>Q&A</i> \"x\""])
hdoc, hpage, _ = check_page(hostile, "hostile report")
text = "".join(hpage.text)
if ZONE not in text or BAND not in text or "<i>Q&A</i>" not in text:
    fail("the hostile names are not shown as text")
if {"b", "i"} & set(hpage.tags):
    fail("a segment name or the title became markup")
ok("a zone <b>&\"docklands and a band </svg><script>... show as text, not markup")

# 3. same input, same bytes (two directories, the same command)
os.mkdir(os.path.join(WORK, "again"))
again = report("../s.csv", "s.html", cwd=os.path.join(WORK, "again"))
os.mkdir(os.path.join(WORK, "first"))
first = report("../s.csv", "s.html", cwd=os.path.join(WORK, "first"))
if open(first, "rb").read() != open(again, "rb").read():
    fail("two runs of the same command differ")
ok("two runs of the same command write the same bytes")

# 4. ten times the rows, about the same size
large = report("l.csv", "l.html")
check_page(large, "report on 10x the rows")
a, b = os.path.getsize(small), os.path.getsize(large)
if not 0.85 <= b / a <= 1.15:
    fail(f"report sizes {a} bytes (10000 rows) and {b} bytes (100000 rows)")
ok(f"{a} bytes on 10000 rows, {b} bytes on 100000 rows")

# 5. the quote table and the on-time rate are those of etacal fit --holdout
summary = run([ETACAL, "fit", "s.csv", "--actual", "actual_s", "--pred", "pred_s", "--by", "zone,band",
               "--target", "0.9", "--holdout", "0.2", "--time", "placed_at", "-o", "q.csv"])
fit_rows = [r for r in csv.reader(open(os.path.join(WORK, "q.csv"), newline=""))]
head = fit_rows[0]
want = [[r[head.index(c)] for c in ("zone", "band", "n", "k", "offset_s", "slope")] for r in fit_rows[1:]]
table = page.tables["table"]
if table[0][:6] != ["zone", "band", "n", "k", "offset_s", "slope"]:
    fail(f"the quote table's header is {table[0]}")
got = [r[:6] for r in table[1:]]
if got != want:
    fail(f"the report's quote table differs from etacal fit's:\n{got[:3]}\n{want[:3]}")
m = re.search(r"^\*\s+\*\s+(\d+)\s+([\d.]+)% \((\d+)/(\d+)\)", summary.split("holdout:")[1], re.M)
r_m = re.search(r"Reached ([\d.]+)% for a target of 90%", doc)
h_m = re.search(r"on time on (\d+) held-out orders with the promise \((\d+)/(\d+)\)", doc)
if not (m and r_m and h_m) or m.group(2) != r_m.group(1) or m.group(3, 4) != h_m.group(2, 3):
    fail(f"on-time rate: fit says {m and m.group(0)}, the report {r_m and r_m.group(0)} / {h_m and h_m.group(0)}")
ok(f"the quote table ({len(want)} rows) and the on-time rate reached ({m.group(2)}%, "
   f"{m.group(3)}/{m.group(4)}) are etacal fit --holdout's")

# 5b. the same with recency weights (etacal fit --half-life)
run([ETACAL, "fit", "s.csv", "--actual", "actual_s", "--pred", "pred_s", "--by", "zone,band", "--target", "0.9",
     "--holdout", "0.2", "--time", "placed_at", "--half-life", "5d", "-q", "-o", "qw.csv"])
wrows = [r for r in csv.reader(open(os.path.join(WORK, "qw.csv"), newline=""))]
wwant = [[r[head.index(c)] for c in ("zone", "band", "n", "k", "offset_s", "slope")] for r in wrows[1:]]
weighted = report("s.csv", "w.html", ["--half-life", "5d"])
wdoc, wpage, _ = check_page(weighted, "weighted report")
if [r[:6] for r in wpage.tables["table"][1:]] != wwant or wwant == want:
    fail("with --half-life 5d the report's quote table is not etacal fit's (or weights changed nothing)")
ok("with --half-life 5d the quote table is etacal fit --half-life's (and differs from the unweighted one)")

# 6. the cost table is etacal curve's
cur = run([ETACAL, "curve", "s.csv", "--actual", "actual_s", "--pred", "pred_s", "--by", "zone,band",
           "--time", "placed_at", "--format", "csv"])
crows = [r for r in csv.DictReader(cur.splitlines()) if r["zone"] == "*" and r["band"] == "*"]
bytarget = {round(float(r["target"]) * 100, 6): r for r in crows}
cost = page.tables["cost"][1:]
if len(cost) < 5:
    fail(f"the cost table has {len(cost)} rows")
for cells in cost:
    t = float(cells[0].rstrip("%"))
    r = bytarget[round(t, 6)]
    hits_n = re.search(r"\((\d+)/(\d+)\)", cells[1]).groups()
    if hits_n != (r["held_hits"], r["held_n"]):
        fail(f"target {cells[0]}: report {hits_n}, curve {r['held_hits']}/{r['held_n']}")
    for col, key in ((3, "mean_promise_s"), (4, "mean_extra_s")):
        if abs(float(cells[col]) - float(r[key]) / 60) > 0.005 + 1e-9:
            fail(f"target {cells[0]} {key}: report {cells[col]} min, curve {float(r[key]) / 60} min")
    if cells[5] != "\u2013" and abs(float(cells[5]) - float(r["marginal_s_per_point"]) / 60) > 0.005 + 1e-9:
        fail(f"target {cells[0]}: +min per point {cells[5]}, curve {float(r['marginal_s_per_point']) / 60}")
ok(f"the cost table's {len(cost)} rows (on time, mean promise, extra, +min per point) are etacal curve's")

# 6b. the segments below the target are curve's, with its Wilson intervals
allrows = {(r["zone"], r["band"], r["target"]): r for r in csv.DictReader(cur.splitlines())}
below = page.tables.get("segments", [])[1:]
nbelow = 0
for r in allrows.values():
    if r["target"] == "0.9" and r["zone"] != "*" and float(r["ci_high"]) < 0.9:
        nbelow += 1
if len(below) != nbelow:
    fail(f"{len(below)} segments listed below the target, curve has {nbelow}")
for cells in below:
    zone, band = cells[0].split(" / ")
    r = allrows[(zone, band, "0.9")]
    hits_n = re.search(r"\((\d+)/(\d+)\)", cells[2]).groups()
    lo, hi = (float(v.rstrip("%")) for v in cells[3].split("\u2013"))
    if hits_n != (r["held_hits"], r["held_n"]) or abs(lo - 100 * float(r["ci_low"])) > 0.005 + 1e-9 or \
            abs(hi - 100 * float(r["ci_high"])) > 0.005 + 1e-9:
        fail(f"segment {cells}: curve says {r}")
ok(f"the {nbelow} segments whose interval lies below the target, with their counts and Wilson intervals, "
   "are etacal curve's")

# 7. the backtest's overall rate is etacal backtest's
bt = run([ETACAL, "backtest", "s.csv", "--actual", "actual_s", "--pred", "pred_s", "--by", "zone,band",
          "--time", "placed_at", "--window", "14d"])
b_m = re.search(r"overall: ([\d.]+)% on time \((\d+)/(\d+)\)", bt)
r_m = re.search(r"Overall ([\d.]+)% on time \((\d+)/(\d+),", doc)
if not (b_m and r_m) or b_m.groups() != r_m.groups():
    fail(f"backtest: {b_m and b_m.group(0)} against the report's {r_m and r_m.group(0)}")
ok(f"the backtest's overall rate ({b_m.group(1)}%, {b_m.group(2)}/{b_m.group(3)}) is etacal backtest's")

# 8. periods whose window bounds no finite promise (days of 7 orders, 5 of
# them delivered by midnight: k = ceil(6 x 0.9) = 6 > 5) are unbounded:
# counted as etacal backtest counts them and drawn as triangles at 100%
with open(os.path.join(WORK, "u.csv"), "w") as f:
    f.write("placed_at,pred_s,actual_s\n")
    for d in range(1, 9):
        hours = list(range(0, 17, 4)) if d % 3 == 1 else list(range(0, 12))
        for h in hours:
            f.write(f"2026-03-0{d}T{h:02d}:00:00Z,1000,{1000 + 37 * h + 11 * d}\n")
        for h in (20, 22):  # five hours on the road: not delivered by midnight
            f.write(f"2026-03-0{d}T{h:02d}:00:00Z,1000,18000\n")
args = ["u.csv", "--actual", "actual_s", "--pred", "pred_s", "--time", "placed_at", "--window", "1d",
        "--every", "1d"]
ub = run([ETACAL, "backtest"] + args)
u_m = re.search(r"promises: (\d+) periods? finite \((\d+) orders\), (\d+) unbounded \((\d+) orders", ub)
if not u_m or int(u_m.group(3)) == 0 or int(u_m.group(1)) == 0:
    fail(f"the stream should give finite and unbounded periods: {ub}")
udoc = run([ETACAL, "report"] + args + ["--holdout", "0.2"])
usec = udoc[udoc.index('<section id="backtest">'):]
usec = usec[:usec.index("</section>")]
n_m = re.search(r"(\d+) periods had too few delivered orders in their window for a finite promise: "
                r"their promise was unbounded and their (\d+) orders", usec)
tri = len(re.findall(r'<path d="M[^"]*Z" fill="#000000"/>', usec)) - 1  # less the legend's
if not n_m or n_m.groups() != (u_m.group(3), u_m.group(4)) or tri != int(u_m.group(3)):
    fail(f"unbounded periods: backtest {u_m.groups()}, report {n_m and n_m.groups()}, {tri} triangles")
ok(f"the {tri} unbounded backtest periods ({u_m.group(4)} orders) are etacal backtest's, drawn as triangles")
subprocess.run(["rm", "-rf", WORK])
