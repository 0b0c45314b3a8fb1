#!/usr/bin/env python3
"""The exact moments that tests/model/test_haar_columns.cpp holds are the Weingarten values.

HaarColumns.MomentsAreTheWeingartenValues compares sampled moments of B + U B U^* with numbers
written into the test. They come from tests/model/weingarten_moments.py (Weingarten calculus;
Collins 2003, Collins & Sniady 2006), which this check runs: every case's m_1..m_4 in the C++
table must equal the script's exact rationals to 1e-15 (relative), in the same order, so that
the table cannot drift from its source.

Usage: check_weingarten_table.py BUILD_DIR   (the build directory is not used)
"""
import os
import re
import sys

here = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, here)
sys.path.insert(0, os.path.join(here, "..", "support"))
import runhelp as rh  # noqa: E402
import weingarten_moments as wm  # noqa: E402
from fractions import Fraction  # noqa: E402

c = rh.Checks("the Weingarten table of test_haar_columns equals its script")
with open(os.path.join(here, "test_haar_columns.cpp"), encoding="utf-8") as f:
    source = f.read()
# {"U=haar_unitary...", b3, "B + U B U^*", 4, false, {0.5, 1.625, 1.625, 131.0 / 30}},
rows = re.findall(r'\{"U=haar_(unitary|orthogonal)[^"]*", \w+, "[^"]*", (\d+), \w+, \{([^}]*)\}\}',
                  source)
c.equal(len(rows), len(wm.CASES), "the C++ table has one row per case of the script")


def value(text):
    text = text.strip()
    if "/" in text:
        num, den = text.split("/")
        return Fraction(num.strip()) / Fraction(den.strip())
    return Fraction(text)


for (group, n, numbers), (g, N, d) in zip(rows, wm.CASES):
    b = [Fraction(x) for x in d]
    exact = [wm.moment(g, b, b, k) for k in range(1, 5)]
    held = [value(t) for t in numbers.split(",")]
    same = len(held) == 4 and all(abs(float(h) - float(e)) <= 1e-15 * max(1.0, abs(float(e)))
                                  for h, e in zip(held, exact))
    c.check(group == g and int(n) == N and same,
            "%s N = %s: m_1..m_4 = %s" % (g, N, ", ".join(str(e) for e in exact)),
            "C++: %s %s %s" % (group, n, numbers))
c.finish()
