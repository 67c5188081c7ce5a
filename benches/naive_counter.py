#!/usr/bin/env python3
"""Naive baseline for the learn figure: count order-3 n-grams of a log with collections.Counter.

Usage: python3 benches/naive_counter.py LOGFILE

Each line is split into tokens (runs of word characters, runs of whitespace, single other
bytes), padded with three start markers and one end marker, and every 4-gram (a context of
three tokens and the token after it, the grams `tracewalk learn --order 3` counts) is counted.
No slot typing: numbers and addresses stay literal. Stdlib only.
"""

import collections
import re
import sys

TOKEN = re.compile(rb"\w+|\s+|[^\w\s]")
START, END = b"<s>", b"</s>"


def main():
    counts = collections.Counter()
    lines = 0
    with open(sys.argv[1], "rb") as f:
        for line in f:
            t = [START, START, START] + TOKEN.findall(line) + [END]
            counts.update(zip(t, t[1:], t[2:], t[3:]))
            lines += 1
    print("%d lines, %d distinct 4-grams, %d 4-grams" % (lines, len(counts), sum(counts.values())))


if __name__ == "__main__":
    main()
