#!/usr/bin/python3
"""Where an analysis spends its time: packbook's stages, from its own marks.

With PACKBOOK_STAGES set, `packbook analyze` writes a line to stderr as each
stage begins ("stage LABEL MS", milliseconds from the start of reading; the
core's stage hook, src/core/stage.h). This runs each log N times and prints,
as a Markdown table, each stage's milliseconds in the quickest run of each log
(by its total), with the median total beside it. Not a test: nothing checks it.

    stages.py --packbook build/packbook [--runs N] NAME=LOG [NAME=LOG ...]
"""
import argparse
import os
import statistics
import subprocess
import sys

# what happens between a mark and the next (README, "Benchmark")
WHAT = {
    "read": "read, split and parse (both threads), spikes and sign",
    "levels": "voltage and current levels, median interval, rest runs",
    "walks": "loaded walk and the model's windows (beside: charge count, current steps)",
    "static fit": "static model's robust fit on its even sample (beside: the tau search)",
    "tau search": "waiting for the tau search (scout, grid, Newton walks, each in two halves)",
    "RC fit": "RC model's fit on its sample, then one pass over every row for both fits",
    "OCV trend": "OCV trend (its even sample, or from it a pass over every row)",
    "SoC and capacity": "SoC and capacity",
    "cells": "per-cell figures",
    "checks": "the whole log's plausibility checks",
    "report": "writing the report",
}


def one_run(packbook, log):
    """[(label, start_ms)] of one analysis, its last the end mark."""
    env = dict(os.environ, PACKBOOK_STAGES="1")
    p = subprocess.run([packbook, "analyze", log, "--json"], env=env,
                       stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, check=True)
    marks = []
    for line in p.stderr.splitlines():
        if line.startswith("stage "):
            label, ms = line[len("stage "):].rsplit(" ", 1)
            marks.append((label, float(ms)))
    if not marks or marks[-1][0] != "end":
        sys.exit(f"stages.py: no stage marks from {packbook} (built before src/core/stage.h?)")
    return marks


def durations(marks):
    """{label: ms until the next mark}, and the total."""
    d = {}
    for (label, t0), (_, t1) in zip(marks, marks[1:]):
        d[label] = d.get(label, 0.0) + (t1 - t0)
    return d, marks[-1][1]


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--packbook", required=True)
    ap.add_argument("--runs", type=int, default=9)
    ap.add_argument("logs", nargs="+", metavar="NAME=LOG")
    a = ap.parse_args()
    cols, order = [], []
    for spec in a.logs:
        name, log = spec.split("=", 1)
        runs = [durations(one_run(a.packbook, log)) for _ in range(a.runs)]
        quickest = min(runs, key=lambda r: r[1])
        median_total = statistics.median(r[1] for r in runs)
        cols.append((name, quickest, median_total))
        for label in quickest[0]:
            if label not in order:
                order.append(label)
    print(f"| stage (quickest of {a.runs} runs, ms) | " + " | ".join(c[0] for c in cols) + " |")
    print("| --- |" + " ---: |" * len(cols))
    for label in order:
        cells = [f"{c[1][0][label]:.0f}" if label in c[1][0] else "-" for c in cols]
        print(f"| {WHAT.get(label, label)} | " + " | ".join(cells) + " |")
    print("| from the start of reading to the end (that run) | "
          + " | ".join(f"{c[1][1]:.0f}" for c in cols) + " |")
    print(f"| the same, median of the {a.runs} runs | "
          + " | ".join(f"{c[2]:.0f}" for c in cols) + " |")


if __name__ == "__main__":
    main()
