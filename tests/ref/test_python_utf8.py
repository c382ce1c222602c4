# SPDX-License-Identifier: GPL-3.0-or-later
"""The UTF-8 check of key values (utf8_valid, used by fit, apply and the
quote-table reader) against CPython's strict UTF-8 decoder (Debian's
python3, no extra package), which implements the well-formed byte
sequences of the Unicode Standard, table 3-7: no overlong forms, no
surrogates (ED A0..BF), nothing above U+10FFFF.  Random byte strings are
biased to the boundaries of that table; the fixed cases are the examples of
ill-formed sequences of Unicode section 3.9 (e.g. C0 AF, E0 9F 80,
F4 90 80 80) and the first and last code points of each length."""
import random

from refutil import run, refcalc

rng = random.Random(20261202)
edges = [0x00, 0x41, 0x7F, 0x80, 0xBF, 0xC0, 0xC1, 0xC2, 0xDF, 0xE0, 0xE1, 0xEC, 0xED, 0xEE, 0xEF,
         0xF0, 0xF1, 0xF3, 0xF4, 0xF5, 0xFF, 0x8F, 0x90, 0x9F, 0xA0]
cases = [b"", b"zone", "Mühle".encode(), "港".encode(), "\U0001F6B2".encode(),
         b"\xc0\xaf", b"\xe0\x9f\x80", b"\xed\xa0\x80", b"\xed\x9f\xbf", b"\xf4\x90\x80\x80",
         b"\xf4\x8f\xbf\xbf", b"\xf0\x8f\xbf\xbf", b"\xf0\x90\x80\x80", b"\xc2\x80", b"\xdf\xbf",
         b"\xe0\xa0\x80", b"\xef\xbf\xbf", b"\x80", b"\xc2", b"\xe1\x80", b"\xf1\x80\x80"]
for _ in range(20000):
    n = rng.randint(1, 8)
    cases.append(bytes(rng.choice(edges) if rng.random() < 0.7 else rng.randrange(256) for _ in range(n)))
# a NUL byte never reaches utf8_valid (the CSV reader refuses it first) but is valid UTF-8
out = run([refcalc(), "utf8"], stdin="".join(c.hex() + "\n" for c in cases)).split()
assert len(out) == len(cases), (len(out), len(cases))
bad = 0
for c, got in zip(cases, out):
    try:
        c.decode("utf-8", "strict")
        want = "1"
    except UnicodeDecodeError:
        want = "0"
    if got != want:
        bad += 1
        if bad <= 10:
            print(f"{c.hex()}: utf8_valid {got}, CPython {want}")
valid = sum(o == "1" for o in out)
print(f"{len(cases)} byte strings ({valid} valid UTF-8), {bad} disagreements with CPython's decoder")
assert bad == 0
