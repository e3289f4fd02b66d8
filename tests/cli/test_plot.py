#!/usr/bin/python3
"""packbook plot: the flight, trend and fleet figures through the CLI.

What each check is measured against (the source and the tolerance are also
named beside each assertion):
  - PNG: the file signature of the PNG specification (ISO/IEC 15948, 5.2:
    137 80 78 71 13 10 26 10), then Pillow (Debian python3-pil) decodes the
    whole image (Image.load) and reports its size, which must equal --size
    (or the documented default) exactly.
  - SVG: Python's xml.etree.ElementTree parses the file; the root must be
    {http://www.w3.org/2000/svg}svg with width and height equal to the size
    (cairo writes points, "1600pt") and viewBox "0 0 W H", exactly.
  - PDF: the header "%PDF-" and the end-of-file marker "%%EOF" of ISO
    32000-1 (7.5.2, 7.5.5; a trailing end-of-line is allowed), and the page's
    MediaBox equal to the size in points, exactly.
  - The axes map (--axes-json) that the program writes: a data value x is
    drawn at left + (x - x.min) / (x.max - x.min) * (right - left), y at
    bottom - (y - y.min) / (y.max - y.min) * (bottom - top), in pixels with
    the origin top left. Pixel tests put the log's own (t, V) samples through
    this mapping and look at the rendered PNG there.
  - The log's own values (read here with Python's csv module): its duration
    and voltage range must lie inside the axes.
  - Round tick steps: 1, 2 or 5 times a power of ten (Heckbert, "Nice numbers
    for graph labels", Graphics Gems, 1990); the right axis of the current
    panel, aligned on the left axis's zero, may also use 2.5 x 10^k (as
    tests/unit/test_plot.c allows). Relative tolerance 1e-9 (the map is
    written with 12 significant digits).
  - Colours: the measured pack voltage is #0072B2 (Okabe & Ito 2008 blue),
    used for nothing else in the flight figure but its legend key.
  - Exit statuses (man packbook, EXIT STATUS): 0 ok, 2 usage (unknown pack
    included), 3 unusable input, 5 the output could not be written.

Logs: the bundled samples/*.csv (README), the project's simulator
scripts/pbsim.py (seeded) for pack histories, and small logs written here.
Every log written here is invented (a stated formula, or pbsim output with
extra resistance added) and says so where it is made; none is a measurement.

Every file lives in a tempfile.TemporaryDirectory; PACKBOOK_DB and
XDG_DATA_HOME point into one too, so nothing touches ~/.local/share.
No check depends on timing.

Run: PACKBOOK=build/packbook /usr/bin/python3 tests/cli/test_plot.py -v
"""
import concurrent.futures
import csv
import datetime
import json
import math
import os
import random
import re
import resource
import shutil
import signal
import sqlite3
import subprocess
import sys
import tempfile
import unittest
import xml.etree.ElementTree as ET

import numpy as np
from PIL import Image

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import pbtest  # noqa: E402
from pbtest import ROOT, run  # noqa: E402

PACKBOOK, PY, PBSIM = pbtest.PACKBOOK, pbtest.PY, pbtest.PBSIM
SAMPLES = os.path.join(ROOT, "samples")
SEED = int(os.environ.get("PB_SEED", "20260302"))

EXIT_OK, EXIT_SOME_FAILED, EXIT_USAGE, EXIT_INPUT, EXIT_STORE, EXIT_INTERNAL = range(6)
EXIT_OUTPUT = EXIT_INTERNAL  # man packbook: 5 also when "the output could not be written"

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification, 5.2
SVG_ROOT = "{http://www.w3.org/2000/svg}svg"

BLUE = (0x00, 0x72, 0xB2)       # measured pack voltage; trend: R0 per flight
GREEN = (0x00, 0x9E, 0x73)      # fleet: packs whose status is ok
GREY = (0x8C, 0x8C, 0x8C)       # fleet: retired packs; flight: the "no data" hatch
VERMILION = (0xD5, 0x5E, 0x00)  # retire levels and projected crossings
PURPLE = (0xCC, 0x79, 0xA7)     # trend: resting cell imbalance per flight (and the fade model)

NEAR = 40    # "close to the colour": each channel within 40 of it (antialiased line)
EXACT = 10   # "that colour": each channel within 10 (a line's fully covered pixels)
REACH = 2    # the trace is looked for within +-2 px of where the map puts a sample
SLACK = 2    # pixels allowed beyond a panel's rectangle (antialiasing at the clip edge)

# analyze options of the bundled samples (README.md, "The sample logs")
SAMPLE_OPTS = {
    "tm07-plain.csv": ["--cells", 4, "--chemistry", "lipo", "--capacity", 5000],
    "tm12-cells.csv": ["--chemistry", "lihv", "--capacity", 4200],
    "tm09-voltage-only.csv": ["--cells", 4],
    "tm03-adc.csv": ["--adc-bits", 10, "--adc-vref", 3.3, "--sense-ratio", 14000,
                     "--sense-ohm", 510],
    "tm15-deep.csv": ["--cells", 4, "--chemistry", "lipo", "--capacity", 5000],
}
# which panels each should get (plot --help: current only with current, cells only with cells)
SAMPLE_PANELS = {
    "tm07-plain.csv": ["voltage", "current", "soc"],
    "tm12-cells.csv": ["voltage", "current", "soc", "cells", "temp"],  # it logs temp_c
    "tm09-voltage-only.csv": ["voltage", "soc"],
    "tm03-adc.csv": ["voltage", "current", "soc"],
    "tm15-deep.csv": ["voltage", "current", "soc"],
}

SCRATCH = None  # TemporaryDirectory for the whole module (setUpModule)
HIST = {}       # the pack histories built once (setUpModule)
EPOCH0 = 1772445600  # 2026-03-02T10:00:00Z, a Monday: the invented histories start here


# ---- helpers -------------------------------------------------------------------------------

def sample(name):
    return os.path.join(SAMPLES, name)


def read_log(path):
    """(t, v) of a CSV log with time_s (or time_unix) and voltage_v columns, comment lines
    and rows without a finite time and voltage skipped: the log's own values."""
    t, v = [], []
    with open(path, newline="") as f:
        rows = csv.reader(line for line in f if not line.startswith("#"))
        head = next(rows)
        it = head.index("time_s") if "time_s" in head else head.index("time_unix")
        iv = head.index("voltage_v")
        for r in rows:
            try:
                a, b = float(r[it]), float(r[iv])
            except (ValueError, IndexError):
                continue
            if math.isfinite(a) and math.isfinite(b):
                t.append(a)
                v.append(b)
    return np.array(t), np.array(v)


def write_log(path, header, rows, comment=None):
    with open(path, "w") as f:
        if comment:
            f.write(f"# {comment}\n")
        f.write(header + "\n")
        for r in rows:
            f.write(r + "\n")
    return path


def step_rows(duration_s=600.0, rate_hz=2.0, skip=None):
    """Invented demo log: current a square wave of 12 A / 30 A (30 s each), pack voltage
    16.6 V - 2.5 mV/s * t - 18 mOhm * I, so the trace is a falling staircase whose steps
    are 0.32 V high. skip(t) -> True drops a row (for gaps)."""
    n = int(round(duration_s * rate_hz))
    out = []
    for k in range(n + 1):
        t = k / rate_hz
        if skip and skip(t):
            continue
        i = 30.0 if (int(t) // 30) % 2 else 12.0
        v = 16.6 - 0.0025 * t - 0.018 * i
        out.append((t, v, i))
    return out


def fmt_rows(rows):
    return [f"{t:.3f},{v:.4f},{i:.3f}" for t, v, i in rows]


def time_unit(duration_s):
    """The flight figure's time unit (man packbook, plot LOG): minutes over 3 minutes, hours
    over 3 hours, else seconds; returns (label ending, seconds per unit)."""
    if duration_s > 3 * 3600:
        return "(h)", 3600.0
    if duration_s > 180:
        return "(min)", 60.0
    return "(s)", 1.0


def seconds_per_unit(label):
    """Seconds per unit of a flight figure's time axis, from its label's unit."""
    for end, div in (("(h)", 3600.0), ("(min)", 60.0), ("(s)", 1.0)):
        if label.endswith(end):
            return div
    raise AssertionError(f"time axis label without a unit: {label!r}")


def axes_map(path):
    with open(path) as f:
        return json.load(f)


def panel(amap, name):
    for p in amap["panels"]:
        if p["name"] == name:
            return p
    names = [p["name"] for p in amap["panels"]]
    raise AssertionError(f"no panel {name!r} in the axes map: {names}")


def to_px(pan, x, y, axis="y"):
    """The axes-map mapping (its definition, see the module docstring)."""
    ax, ay = pan["x"], pan[axis]
    fx = pan["left"] + (x - ax["min"]) / (ax["max"] - ax["min"]) * (pan["right"] - pan["left"])
    fy = pan["bottom"] - (y - ay["min"]) / (ay["max"] - ay["min"]) * (pan["bottom"] - pan["top"])
    return fx, fy


def load_rgb(path):
    with Image.open(path) as im:
        return np.asarray(im.convert("RGB"), dtype=np.int16)


def colour_mask(img, rgb, tol):
    return np.abs(img - np.array(rgb, dtype=np.int16)).max(axis=2) <= tol


def near(mask, fx, fy, reach):
    """Any set pixel within +-reach px of the pixel holding figure point (fx, fy)."""
    c, r = int(math.floor(fx)), int(math.floor(fy))
    h, w = mask.shape
    return bool(mask[max(r - reach, 0):min(r + reach + 1, h),
                     max(c - reach, 0):min(c + reach + 1, w)].any())


def box_mask(shape, box, slack):
    """Pixels of a {left, top, right, bottom} box (a panel or its legend), +- slack."""
    m = np.zeros(shape, dtype=bool)
    r0, r1 = max(int(math.floor(box["top"])) - slack, 0), int(math.ceil(box["bottom"])) + slack
    c0, c1 = max(int(math.floor(box["left"])) - slack, 0), int(math.ceil(box["right"])) + slack
    m[r0:r1 + 1, c0:c1 + 1] = True
    return m


def interior(mask, box, slack):
    """The part of mask inside box, slack px in from each edge."""
    return mask[int(math.ceil(box["top"])) + slack:int(math.floor(box["bottom"])) - slack,
                int(math.ceil(box["left"])) + slack:int(math.floor(box["right"])) - slack]


def is_round(step, allow_2_5=False):
    """1, 2 or 5 (or 2.5 when allowed) times a power of ten, relative 1e-9."""
    if not (step > 0 and math.isfinite(step)):
        return False
    p = 10.0 ** math.floor(math.log10(step) + 1e-12)
    m = step / p
    mults = (1.0, 2.0, 5.0, 10.0) + ((2.5,) if allow_2_5 else ())
    return any(abs(m - k) <= 1e-9 * k for k in mults)


def svg_length(text):
    m = re.fullmatch(r"\s*([0-9.]+)\s*(pt|px)?\s*", text or "")
    if not m:
        raise AssertionError(f"SVG length {text!r} is not a number in pt or px")
    return float(m.group(1))


def pb(db, *args):
    """packbook VERB ... --db DB."""
    return run(*args, "--db", db)


def limited_fsize(limit):
    """preexec_fn: files the child writes may not grow past limit bytes (writes beyond
    fail with EFBIG; SIGXFSZ ignored so they fail rather than kill the process)."""
    def set_limit():
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return set_limit


def stray_temp_files(folder):
    return sorted(f for f in os.listdir(folder) if ".tmp-" in f)


# ---- file checks (shared by the test classes) ----------------------------------------------

class FigureChecks:
    def assert_png(self, path, w, h):
        with open(path, "rb") as f:
            head = f.read(8)
        self.assertEqual(head, PNG_SIGNATURE, f"{path}: not a PNG signature (PNG spec 5.2)")
        with Image.open(path) as im:
            self.assertEqual(im.format, "PNG", path)
            self.assertEqual(im.size, (w, h), f"{path}: PNG size (exact)")
            im.load()  # Pillow decodes every row: a truncated or corrupt stream raises

    def assert_svg(self, path, w, h):
        root = ET.parse(path).getroot()  # raises on XML that is not well-formed
        self.assertEqual(root.tag, SVG_ROOT, f"{path}: root element")
        self.assertEqual(svg_length(root.get("width")), w, f"{path}: width (exact)")
        self.assertEqual(svg_length(root.get("height")), h, f"{path}: height (exact)")
        vb = [float(x) for x in (root.get("viewBox") or "").split()]
        self.assertEqual(vb, [0, 0, w, h], f"{path}: viewBox (exact)")

    def assert_pdf(self, path, w, h):
        with open(path, "rb") as f:
            data = f.read()
        self.assertTrue(data.startswith(b"%PDF-"), f"{path}: PDF header (ISO 32000-1 7.5.2)")
        self.assertTrue(data.rstrip(b"\r\n").endswith(b"%%EOF"),
                        f"{path}: PDF end-of-file marker (ISO 32000-1 7.5.5)")
        boxes = re.findall(rb"/MediaBox\s*\[\s*([-0-9.\s]+)\]", data)
        self.assertTrue(boxes, f"{path}: no MediaBox")
        for b in boxes:
            self.assertEqual([float(x) for x in b.split()], [0, 0, w, h],
                             f"{path}: page size in points (exact)")

    def assert_figure(self, path, w, h):
        ext = os.path.splitext(path)[1].lower()
        {".png": self.assert_png, ".svg": self.assert_svg, ".pdf": self.assert_pdf}[ext](path, w, h)

    def assert_map_sane(self, amap, w, h, names, fmt="png"):
        """The map's own consistency: size and format as asked, panels named as documented,
        inside the figure, stacked without overlap, round ticks inside each axis."""
        self.assertEqual((amap["width"], amap["height"]), (w, h), "map size (exact)")
        self.assertEqual(amap["format"], fmt)
        self.assertEqual([p["name"] for p in amap["panels"]], names, "panels (plot --help)")
        prev = None
        for p in amap["panels"]:
            self.assertTrue(0 <= p["left"] < p["right"] <= w, f"{p['name']}: x inside the figure")
            self.assertTrue(0 <= p["top"] < p["bottom"] <= h, f"{p['name']}: y inside the figure")
            if prev is not None:
                self.assertGreaterEqual(p["top"], prev["bottom"],
                                        f"{p['name']} overlaps {prev['name']}")
            lg = p.get("legend")
            if lg is not None:
                self.assertTrue(0 <= lg["left"] < lg["right"] <= w
                                and 0 <= lg["top"] < lg["bottom"] <= h,
                                f"{p['name']}: legend inside the figure")
                self.assertTrue(p["left"] - 1 <= lg["left"] and lg["right"] <= p["right"] + 1,
                                f"{p['name']}: legend within the panel's width")
                self.assertLessEqual(lg["bottom"], p["top"] + 1,
                                     f"{p['name']}: legend above its panel")
                if prev is not None:
                    self.assertGreaterEqual(lg["top"], prev["bottom"] - 1,
                                            f"{p['name']}: legend over {prev['name']}'s plot area")
            prev = p
            for key in ("x", "y", "y2"):
                if key not in p:
                    continue
                a = p[key]
                what = f"{p['name']}.{key}"
                self.assertLess(a["min"], a["max"], what)
                self.assertTrue(is_round(a["tick_step"], allow_2_5=(key == "y2")),
                                f"{what}: tick step {a['tick_step']} is not 1, 2 or 5 x 10^k")
                self.assertGreaterEqual(a["ticks"], 2, what)
                last = a["tick_first"] + (a["ticks"] - 1) * a["tick_step"]
                eps = 1e-9 * (abs(a["min"]) + abs(a["max"]) + a["tick_step"])
                self.assertGreaterEqual(a["tick_first"], a["min"] - eps, f"{what}: first tick")
                self.assertLessEqual(last, a["max"] + eps, f"{what}: last tick")

    def check_time_and_voltage(self, amap, t, v):
        dur = t[-1] - t[0]
        unit, div = time_unit(dur)
        for p in amap["panels"]:
            x = p["x"]
            self.assertTrue(x["label"].endswith(unit),
                            f"{p['name']}: x label {x['label']!r} for a {dur} s log")
            eps = 1e-9 * max(1.0, dur / div)  # 12 significant digits in the map
            self.assertLessEqual(x["min"], 0 + eps, f"{p['name']}: x starts at the first sample")
            self.assertGreaterEqual(x["max"], dur / div - eps, f"{p['name']}: x reaches the end")
        y = panel(amap, "voltage")["y"]
        self.assertLessEqual(y["min"], v.min() + 1e-9, "lowest voltage inside the axis")
        self.assertGreaterEqual(y["max"], v.max() - 1e-9, "highest voltage inside the axis")

    def assert_gap_drawn(self, m, img, t_before, t_after):
        """Between the last sample before a gap and the first after it (seconds since the
        first sample), 3 px clear of both, the voltage panel has no trace (the line breaks)
        and has the grey hatch."""
        pan = panel(m, "voltage")
        div = seconds_per_unit(pan["x"]["label"])
        xa, _ = to_px(pan, t_before / div, 0)
        xb, _ = to_px(pan, t_after / div, 0)
        r0, r1 = int(pan["top"]) + SLACK, int(pan["bottom"]) - SLACK
        c0, c1 = int(math.ceil(xa)) + 3, int(math.floor(xb)) - 3
        self.assertGreater(c1 - c0, 5, "the gap spans columns at this size")
        inner = img[r0:r1, c0:c1]
        self.assertFalse(colour_mask(inner, BLUE, NEAR).any(),
                         f"voltage trace drawn across the gap {t_before} .. {t_after} s")
        self.assertTrue(colour_mask(inner, GREY, NEAR).any(), "the gap is hatched")

    def assert_colour_only_in(self, img, rgb, pan, slack, what):
        """Pixels of exactly that colour (EXACT) exist, and lie only inside the panel (+-
        slack px) or inside its legend's box (the key repeats the series' colour; the box
        is in the axes map)."""
        strict = colour_mask(img, rgb, EXACT)
        self.assertGreater(int(strict.sum()), 20, f"{what} is drawn in #%02X%02X%02X" % rgb)
        self.assertIn("legend", pan, "the axes map gives the legend's box")
        allowed = box_mask(strict.shape, pan, slack) | box_mask(strict.shape, pan["legend"], SLACK)
        rows, cols = np.nonzero(strict & ~allowed)
        stray = sorted(set(zip(cols.tolist(), rows.tolist())))
        self.assertEqual(stray[:20], [], f"{len(stray)} px of {what}'s colour (x, y) outside "
                                         "its panel and legend")
        self.assertTrue(strict[box_mask(strict.shape, pan["legend"], 0)].any(),
                        f"{what}'s legend key")

    def plot(self, *args, expect=EXIT_OK):
        rc, out, err = run("plot", *args)
        self.assertEqual(rc, expect, f"packbook plot {' '.join(map(str, args))}: {err}")
        return out, err


# ---- module fixture: the pack histories ------------------------------------------------------

def pbsim(out, seed, *args):
    cmd = [PY, PBSIM, "--seed", str(seed), "-o", out, *map(str, args)]
    p = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    if p.returncode != 0:
        raise AssertionError(f"pbsim failed ({p.returncode}): {' '.join(cmd)}\n{p.stderr}")
    with open(out) as f:
        rows = [r for r in csv.reader(line for line in f if not line.startswith("#"))]
    assert rows[0] == ["time_unix", "voltage_v", "current_a"], rows[0]
    return [(float(a), float(b), float(c)) for a, b, c in rows[1:]]


def derived_log(path, base, shift_s, extra_ohm, comment):
    """A flight made from a simulated one (invented): shifted in time, with extra_ohm of
    series resistance added (V - extra_ohm * I) and a comment line that makes its content,
    and so its hash, its own."""
    t0 = base[0][0]
    rows = [f"{t - t0 + EPOCH0 + shift_s:.3f},{v - extra_ohm * i:.4f},{i:.3f}" for t, v, i in base]
    return write_log(path, "time_unix,voltage_v,current_a", rows, comment)


def must(rc_out_err, what):
    rc, out, err = rc_out_err
    if rc != EXIT_OK:
        raise AssertionError(f"{what}: exit {rc}: {err}")
    return out


def build_histories(root):
    """Two databases: 'trend' with TR-MANY (8 flights, R0 rising), TR-ONE (1 flight),
    TR-NONE (none) and TR-OLD (retired); 'fleet' with 100 packs of 1, 2 or 6 flights
    of 100 s (201 rows) each, one of them retired. All logs are pbsim output reworked as
    derived_log says."""
    logs = os.path.join(root, "logs")
    os.makedirs(logs)
    common = ["--format", "epoch", "--cells", 4, "--capacity-mah", 2000, "--rate-hz", 2,
              "--rest-start-s", 5, "--rest-end-s", 5, "--start-epoch", EPOCH0]
    specs = [(os.path.join(logs, "base-trend.csv"), SEED, common + ["--duration-s", 300,
                                                                    "--hover-a", 12]),
             (os.path.join(logs, "base-f0.csv"), SEED + 1, common + ["--duration-s", 100,
                                                                     "--hover-a", 20]),
             (os.path.join(logs, "base-f1.csv"), SEED + 2, common + ["--duration-s", 100,
                                                                     "--hover-a", 18])]
    with concurrent.futures.ThreadPoolExecutor(max_workers=3) as ex:
        bases = list(ex.map(lambda s: pbsim(s[0], s[1], *s[2]), specs))

    tdb = os.path.join(root, "trend.db")
    for label in ("TR-MANY", "TR-ONE", "TR-NONE", "TR-OLD"):
        must(pb(tdb, "pack", "add", label, "--cells", 4, "--chemistry", "lipo",
                "--capacity", 2000), f"pack add {label}")
    many = []
    for k in range(8):  # one flight every 3 days, 3 mOhm (pack) more resistance each time
        many.append(derived_log(os.path.join(logs, f"tr-many-{k}.csv"), bases[0],
                                k * 3 * 86400, 0.003 * k, f"invented: TR-MANY flight {k}"))
    must(pb(tdb, "import", "--pack", "TR-MANY", "--quiet", *many), "import TR-MANY")
    one = derived_log(os.path.join(logs, "tr-one.csv"), bases[0], 86400, 0.0,
                      "invented: TR-ONE's only flight")
    must(pb(tdb, "import", "--pack", "TR-ONE", "--quiet", one), "import TR-ONE")
    old = derived_log(os.path.join(logs, "tr-old.csv"), bases[0], 2 * 86400, 0.002,
                      "invented: TR-OLD's only flight")
    must(pb(tdb, "import", "--pack", "TR-OLD", "--quiet", old), "import TR-OLD")
    must(pb(tdb, "pack", "retire", "TR-OLD", "--reason", "invented: puffed"), "retire TR-OLD")

    fdb = os.path.join(root, "fleet.db")
    for k in range(100):
        label = f"FL-{k:03d}"
        # rated 2000 .. 3188 mAh for the same simulated 2000 mAh flights: capacity from
        # about 120 % down to about 75 % of rated, so ok, watch and retire all occur
        must(pb(fdb, "pack", "add", label, "--cells", 4, "--chemistry", "lipo",
                "--capacity", 2000 + 12 * k), f"pack add {label}")
        files = []
        # most packs: 1 or 2 flights (R0 stays at its baseline, the first three flights);
        # every fifth: 6 flights, the last three with 0 .. 29 mOhm (pack) more resistance,
        # so its R0 now (median of the last five) moves off the baseline by up to ~180 %
        nflights = 6 if k % 5 == 4 else (1 if k % 3 == 0 else 2)
        for j in range(nflights):
            extra = 0.0012 * (k % 25) if nflights == 6 and j >= 3 else 0.0
            files.append(derived_log(os.path.join(logs, f"fl-{k:03d}-{j}.csv"), bases[1 + k % 2],
                                     k * 600 + j * 86400, extra,
                                     f"invented: {label} flight {j}"))
        must(pb(fdb, "import", "--pack", label, "--quiet", *files), f"import {label}")
    must(pb(fdb, "pack", "retire", "FL-050", "--reason", "invented: dropped"), "retire FL-050")
    return {"trend_db": tdb, "fleet_db": fdb}


def setUpModule():
    global SCRATCH
    SCRATCH = tempfile.TemporaryDirectory(prefix="pbplot-")
    # belt and braces: a command that forgot --db lands here, never in $HOME
    os.environ["PACKBOOK_DB"] = os.path.join(SCRATCH.name, "stray", "packbook.db")
    os.environ["XDG_DATA_HOME"] = os.path.join(SCRATCH.name, "xdg")
    HIST.update(build_histories(os.path.join(SCRATCH.name, "hist")))


def tearDownModule():
    if SCRATCH is not None:
        SCRATCH.cleanup()


# ---- 1. every sample in every format ---------------------------------------------------------

class Formats(FigureChecks, unittest.TestCase):
    def test_samples_default_size_every_format(self):
        with tempfile.TemporaryDirectory() as d:
            for name, opts in SAMPLE_OPTS.items():
                # plot --help: default 1600x1100, 1600x1300 with cell columns
                w, h = (1600, 1300) if "cells" in SAMPLE_PANELS[name] else (1600, 1100)
                for ext in ("png", "svg", "pdf"):
                    with self.subTest(log=name, fmt=ext):
                        out = os.path.join(d, f"{name}.{ext}")
                        amap = os.path.join(d, f"{name}.{ext}.json")
                        stdout, _ = self.plot(sample(name), *opts, "-o", out, "--axes-json", amap)
                        self.assertEqual(stdout, f"wrote {out}\n")
                        self.assert_figure(out, w, h)
                        self.assert_map_sane(axes_map(amap), w, h, SAMPLE_PANELS[name], ext)
                        self.assertEqual(stray_temp_files(d), [])

    def test_given_sizes(self):
        # the bounds of --size (480x360 .. 12000x12000) and a size of another aspect;
        # the largest only as SVG (a 12000x12000 PNG would be 576 MB of pixels in memory)
        cases = [("png", 480, 360), ("png", 1000, 700), ("png", 900, 1400), ("svg", 480, 360),
                 ("pdf", 1000, 700), ("svg", 12000, 12000)]
        with tempfile.TemporaryDirectory() as d:
            for name in ("tm12-cells.csv", "tm07-plain.csv"):
                for ext, w, h in cases:
                    with self.subTest(log=name, fmt=ext, size=f"{w}x{h}"):
                        out = os.path.join(d, f"s.{ext}")
                        amap = os.path.join(d, "s.json")
                        self.plot(sample(name), *SAMPLE_OPTS[name], "-o", out, "--size", f"{w}x{h}",
                                  "--axes-json", amap)
                        self.assert_figure(out, w, h)
                        self.assert_map_sane(axes_map(amap), w, h, SAMPLE_PANELS[name], ext)

    def test_axes_cover_each_sample(self):
        """The map against the log's own values: time since the first sample from 0 to the
        duration (minutes when over 180 s), the voltage range inside the voltage axis."""
        with tempfile.TemporaryDirectory() as d:
            for name, opts in SAMPLE_OPTS.items():
                with self.subTest(log=name):
                    t, v = read_log(sample(name))
                    out, amap = os.path.join(d, "a.png"), os.path.join(d, "a.json")
                    self.plot(sample(name), *opts, "-o", out, "--axes-json", amap)
                    self.check_time_and_voltage(axes_map(amap), t, v)

# ---- 2. edge cases ---------------------------------------------------------------------------

class EdgeCases(FigureChecks, unittest.TestCase):
    def render_png(self, log, *opts, panels=None):
        with tempfile.TemporaryDirectory() as d:
            out, amap = os.path.join(d, "e.png"), os.path.join(d, "e.json")
            self.plot(log, *opts, "-o", out, "--axes-json", amap)
            self.assert_png(out, 1600, 1100)
            m = axes_map(amap)
            self.assert_map_sane(m, 1600, 1100, panels or ["voltage", "current", "soc"])
            return m, load_rgb(out)

    def test_one_sample(self):
        # issue: "each plot renders for ... one sample" (plot_flight marks a lone sample)
        with tempfile.TemporaryDirectory() as d:
            log = write_log(os.path.join(d, "one.csv"), "time_s,voltage_v,current_a",
                            ["0.0,16.50,10.0"], "invented: a single sample")
            opts = ["--cells", 4, "--chemistry", "lipo", "--capacity", 5000]
            rc, _, _ = run("analyze", log, *opts)
            self.assertEqual(rc, EXIT_INPUT, "analyze needs two samples (man: exit 3)")
            m, img = self.render_png(log, *opts)
            pan = panel(m, "voltage")
            self.assertTrue(pan["x"]["min"] <= 0.0 < pan["x"]["max"], pan["x"])
            self.assertTrue(pan["y"]["min"] <= 16.5 <= pan["y"]["max"], pan["y"])
            # its mark: a filled #0072B2 circle where the map puts (0 s, 16.50 V)
            fx, fy = to_px(pan, 0.0, 16.5)
            self.assertTrue(near(colour_mask(img, BLUE, NEAR), fx, fy, REACH), (fx, fy))
            self.assert_colour_only_in(img, BLUE, pan, 10, "the one sample's mark")

    def test_two_samples(self):
        with tempfile.TemporaryDirectory() as d:
            log = write_log(os.path.join(d, "two.csv"), "time_s,voltage_v,current_a",
                            ["0.0,16.50,10.0", "1.0,16.40,10.0"], "invented: two samples")
            m, _ = self.render_png(log, "--cells", 4)
            self.assertGreaterEqual(panel(m, "voltage")["x"]["max"], 1.0 - 1e-9)

    def test_flat_current(self):
        with tempfile.TemporaryDirectory() as d:
            # invented: 15 A throughout for 120 s, voltage falling 2 mV/s
            rows = [f"{k * 0.5:.1f},{16.2 - 0.002 * k * 0.5:.4f},15.000" for k in range(241)]
            log = write_log(os.path.join(d, "flat.csv"), "time_s,voltage_v,current_a", rows,
                            "invented: constant current")
            m, _ = self.render_png(log, "--cells", 4, "--chemistry", "lipo", "--capacity", 5000)
            cur = panel(m, "current")["y"]
            self.assertTrue(cur["min"] <= 15.0 <= cur["max"], "15 A inside the current axis")
            self.assertTrue(panel(m, "voltage")["x"]["label"].endswith("(s)"), "120 s: seconds")

    def test_gap_and_missing_fields(self):
        """30 s missing in the middle, and four rows with an empty or NaN field: the reader
        drops those rows and reports them and the gap; the figure still renders, hatches the
        gap and breaks the voltage trace across it."""
        with tempfile.TemporaryDirectory() as d:
            rows = fmt_rows(step_rows(skip=lambda t: 280.0 <= t < 310.0))
            rows[100] = "50.000,,12.000"        # empty voltage
            rows[200] = "100.000,16.1000,nan"   # NaN current
            rows[300] = "150.000,NaN,NaN"
            rows[400] = "200.000,15.6000,"      # empty current
            log = write_log(os.path.join(d, "gap.csv"), "time_s,voltage_v,current_a", rows,
                            "invented: staircase with a 30 s gap and bad rows")
            opts = ["--cells", 4, "--chemistry", "lipo", "--capacity", 5000]
            rc, out, err = run("analyze", log, "--json", *opts)
            self.assertEqual(rc, EXIT_OK, err)
            doc = json.loads(out)
            codes = {w["code"] for w in doc["warnings"]}
            self.assertTrue({"gaps", "dropped_empty_field", "dropped_nonfinite"} <= codes, codes)
            self.assertEqual(doc["samples"], len(rows) - 4, "the four bad rows dropped")
            m, img = self.render_png(log, *opts)
            # the gap runs from the last sample before it (279.5 s) to the first after (310 s)
            self.assert_gap_drawn(m, img, 279.5, 310.0)

    def check_current_panel(self, m, rows):
        """The current panel against the log's own values: current (A) inside the left
        axis and power V * I (W) inside the right one, and the right axis's zero at the
        left axis's zero (they share grid lines; exact up to 1e-6 px)."""
        pan = panel(m, "current")
        rows = [tuple(map(float, r.split(","))) for r in fmt_rows(rows)]  # as written
        cur = [i for _, _, i in rows]
        pw = [v * i for _, v, i in rows]
        y, y2 = pan["y"], pan["y2"]
        self.assertTrue(y["min"] <= min(cur) and max(cur) <= y["max"], (min(cur), max(cur), y))
        self.assertTrue(y2["min"] <= min(pw) and max(pw) <= y2["max"], (min(pw), max(pw), y2))
        self.assertEqual(y["ticks"], y2["ticks"], "one grid for both axes")
        self.assertAlmostEqual(to_px(pan, 0, 0)[1], to_px(pan, 0, 0, "y2")[1], delta=1e-6)

    def test_regeneration(self):
        """Invented: 20 s at 25 A, 20 s at -8 A (regeneration), 20 s at 5 A, over 5 min; the
        current and power axes reach below zero, their zeros aligned."""
        rows = []
        for k in range(601):
            t = k * 0.5
            i = (25.0, -8.0, 5.0)[(int(t) // 20) % 3]
            rows.append((t, 16.5 - 0.002 * t - 0.02 * i, i))
        with tempfile.TemporaryDirectory() as d:
            log = write_log(os.path.join(d, "regen.csv"), "time_s,voltage_v,current_a",
                            fmt_rows(rows), "invented: regeneration")
            m, _ = self.render_png(log, "--cells", 4)
            self.check_current_panel(m, rows)
            self.assertLess(panel(m, "current")["y"]["min"], 0)
        rows = step_rows()
        with tempfile.TemporaryDirectory() as d:
            log = write_log(os.path.join(d, "stairs.csv"), "time_s,voltage_v,current_a",
                            fmt_rows(rows), "invented: staircase")
            m, _ = self.render_png(log, "--cells", 4)
            self.check_current_panel(m, rows)

    def test_voltage_only(self):
        with tempfile.TemporaryDirectory() as d:
            # invented: 4S, no current column, 5 min at 1 Hz
            rows = [f"{k:.1f},{16.5 - 0.004 * k:.4f}" for k in range(301)]
            log = write_log(os.path.join(d, "vonly.csv"), "time_s,voltage_v", rows,
                            "invented: voltage only")
            m, _ = self.render_png(log, "--cells", 4, panels=["voltage", "soc"])
            self.assertTrue(panel(m, "voltage")["x"]["label"].endswith("(min)"), "300 s: minutes")

    def test_time_unit_boundaries(self):
        # plot: minutes when the log lasts over 180 s (180 s exactly stays in seconds), hours
        # over 3 hours (3 hours exactly stays in minutes)
        with tempfile.TemporaryDirectory() as d:
            for dur, unit in ((180.0, "(s)"), (180.5, "(min)"), (10800.0, "(min)"),
                              (10801.0, "(h)")):
                with self.subTest(duration=dur):
                    step = 0.5 if dur < 1000 else 10.0  # a long log, sparsely
                    rows = [f"{t:.2f},{16.4 - 0.003 * t / max(1, dur / 180):.4f},"
                            f"{10 + 10 * (int(t / step) // 40 % 2)}"
                            for t in list(np.arange(0, dur, step)) + [dur]]
                    log = write_log(os.path.join(d, f"d{dur}.csv"), "time_s,voltage_v,current_a",
                                    rows, "invented: boundary of the time unit")
                    m, _ = self.render_png(log, "--cells", 4)
                    x = panel(m, "voltage")["x"]
                    self.assertTrue(x["label"].endswith(unit), x["label"])
                    self.assertEqual(time_unit(dur)[0], unit)
                    self.assertGreaterEqual(x["max"], dur / time_unit(dur)[1] - 1e-9)

    def test_time_not_starting_at_zero(self):
        # the x axis is time since the first sample, whatever the log's clock says
        with tempfile.TemporaryDirectory() as d:
            rows = [f"{1000 + t:.3f},{v:.4f},{i:.3f}" for t, v, i in step_rows(120.0)]
            log = write_log(os.path.join(d, "late.csv"), "time_s,voltage_v,current_a", rows,
                            "invented: clock starting at 1000 s")
            m, _ = self.render_png(log, "--cells", 4)
            x = panel(m, "voltage")["x"]
            self.assertLessEqual(x["min"], 1e-9)
            self.assertTrue(120.0 - 1e-9 <= x["max"] < 1000.0, x)

    def test_standard_input(self):
        with tempfile.TemporaryDirectory() as d:
            out = os.path.join(d, "stdin.png")
            with open(sample("tm07-plain.csv"), "rb") as f:
                p = subprocess.run([PACKBOOK, "plot", "-", *map(str, SAMPLE_OPTS["tm07-plain.csv"]),
                                    "-o", out], stdin=f, capture_output=True, timeout=60)
            self.assertEqual(p.returncode, EXIT_OK, p.stderr)
            self.assert_png(out, 1600, 1100)


# ---- 3. the voltage trace is where the map says, and nowhere else --------------------------

class LandingReserve(FigureChecks, unittest.TestCase):
    def test_reserve_on_the_soc_panel(self):
        """The landing reserve (30 %, predict's default, common practice) is a vermilion line
        across the SoC panel: every vermilion pixel inside that panel lies within 2 px of the
        row the axes map puts 30 % at, and the line spans most of the panel's width."""
        with tempfile.TemporaryDirectory() as d:
            out, amap = os.path.join(d, "r.png"), os.path.join(d, "r.json")
            log = os.path.join(ROOT, "samples", "tm07-plain.csv")
            self.plot(log, "--cells", 4, "--chemistry", "lipo", "--capacity", 5000, "-o", out,
                      "--axes-json", amap)
            m = axes_map(amap)
            pan = panel(m, "soc")
            _, y30 = to_px(pan, 0, 30.0)
            red = interior(colour_mask(load_rgb(out), VERMILION, NEAR), pan, SLACK)
            rows, cols = np.nonzero(red)
            self.assertGreater(len(rows), 0, "no reserve line")
            rows = rows + int(math.ceil(pan["top"])) + SLACK
            off = sorted({int(r) for r in rows if abs(r + 0.5 - y30) > 2})
            self.assertEqual(off[:10], [], "vermilion off the 30 % row")
            # a dotted line: its dots spread over at least 80 % of the panel's width
            self.assertGreater(cols.max() - cols.min(), 0.8 * (pan["right"] - pan["left"] - 20))


class TemperaturePanel(FigureChecks, unittest.TestCase):
    def test_temperature_trace(self):
        """samples/tm12-cells.csv logs temp_c: a 'temp' panel draws it in #CC79A7; every 25th
        sample's (t, temperature) from the log has a pixel of that colour within 2 px of where
        the axes map puts it (the log's own numbers are the reference)."""
        log = os.path.join(ROOT, "samples", "tm12-cells.csv")
        with open(log) as f:
            rows = list(csv.DictReader(line for line in f if not line.startswith("#")))
        with tempfile.TemporaryDirectory() as d:
            out, amap = os.path.join(d, "t.png"), os.path.join(d, "t.json")
            self.plot(log, "--chemistry", "lihv", "--capacity", 4200, "-o", out, "--axes-json",
                      amap)
            m = axes_map(amap)
            pan = panel(m, "temp")
            div = seconds_per_unit(pan["x"]["label"])
            purple = colour_mask(load_rgb(out), (0xCC, 0x79, 0xA7), NEAR)
            t0 = float(rows[0]["time_s"])
            for r in rows[::25]:
                fx, fy = to_px(pan, (float(r["time_s"]) - t0) / div, float(r["temp_c"]))
                self.assertTrue(near(purple, fx, fy, 2), f"no temperature at {r['time_s']} s")
        # a log without temperature has no such panel (see SAMPLE_PANELS for tm07)


class VoltageTrace(FigureChecks, unittest.TestCase):
    def check_trace(self, log, opts, t, v, min_checked):
        """Renders log; every sampled (t, v) of the log must have a pixel close to #0072B2
        within +-2 px of where the map puts it, and no pixel of that colour may lie outside
        the voltage panel but the legend's key. Samples where the sag-corrected OCV (drawn
        over the trace, from analyze --series) comes within 6 px are not looked at."""
        with tempfile.TemporaryDirectory() as d:
            out, amap, series = (os.path.join(d, n) for n in ("v.png", "v.json", "s.csv"))
            self.plot(log, *opts, "-o", out, "--axes-json", amap)
            rc, _, err = run("analyze", log, *opts, "--series", series)
            self.assertEqual(rc, EXIT_OK, err)
            with open(series, newline="") as f:
                ser = list(csv.DictReader(f))
            self.assertEqual(len(ser), len(t), "every sample kept")
            ocv = np.array([float(r["ocv_v"]) if r["ocv_v"] else np.nan for r in ser])
            m = axes_map(amap)
            img = load_rgb(out)
            self.assertEqual(img.shape[:2], (m["height"], m["width"]))
            pan = panel(m, "voltage")
            self.check_time_and_voltage(m, t, v)
            div = seconds_per_unit(pan["x"]["label"])
            x = (t - t[0]) / div
            loose = colour_mask(img, BLUE, NEAR)
            idx = np.unique(np.linspace(0, len(t) - 1, 240).round().astype(int))
            checked, missing = 0, []
            for k in idx:
                fx, fy = to_px(pan, x[k], v[k])
                if math.isfinite(ocv[k]) and abs(to_px(pan, x[k], ocv[k])[1] - fy) < 6:
                    continue
                checked += 1
                if not near(loose, fx, fy, REACH):
                    missing.append((round(float(t[k]), 3), float(v[k]), round(fx, 1), round(fy, 1)))
            self.assertGreaterEqual(checked, min_checked, "enough samples looked at")
            self.assertEqual(missing, [], "samples (t, V, px, py) with no trace within +-2 px")

            self.assert_colour_only_in(img, BLUE, pan, SLACK, "the voltage trace")

    def test_staircase(self):
        """Invented 10 min staircase (step_rows): 1201 samples, fewer than 4 per pixel
        column, so every sample is a vertex of the drawn line."""
        with tempfile.TemporaryDirectory() as d:
            rows = step_rows()
            log = write_log(os.path.join(d, "stairs.csv"), "time_s,voltage_v,current_a",
                            fmt_rows(rows), "invented: staircase for the pixel test")
            t, v = read_log(log)
            self.check_trace(log, ["--cells", 4, "--chemistry", "lipo", "--capacity", 5000],
                             t, v, min_checked=200)

    def test_dense_noisy_log(self):
        """Invented 10 min at 20 Hz (12001 samples) with seeded 15 mV noise: more than 4
        samples per pixel column, so the figure draws each column's first, lowest, highest
        and last value; every sample must still be on the drawn trace."""
        rnd = random.Random(SEED)
        with tempfile.TemporaryDirectory() as d:
            rows = []
            for t, v, i in step_rows(rate_hz=20.0):
                rows.append(f"{t:.3f},{v + rnd.gauss(0, 0.015):.4f},{i + rnd.gauss(0, 0.2):.3f}")
            log = write_log(os.path.join(d, "dense.csv"), "time_s,voltage_v,current_a", rows,
                            "invented: dense noisy staircase")
            t, v = read_log(log)
            self.check_trace(log, ["--cells", 4, "--chemistry", "lipo", "--capacity", 5000],
                             t, v, min_checked=200)

    def test_sample_tm15(self):
        """The bundled sample flown past the floor (tinted) with a 24 s logger dropout: the
        trace where the map says, and broken over the dropout (found in the log: its
        longest step between samples)."""
        t, v = read_log(sample("tm15-deep.csv"))
        self.check_trace(sample("tm15-deep.csv"), SAMPLE_OPTS["tm15-deep.csv"], t, v,
                         min_checked=150)
        k = int(np.argmax(np.diff(t)))
        self.assertGreater(t[k + 1] - t[k], 20, "the dropout")
        with tempfile.TemporaryDirectory() as d:
            out, amap = os.path.join(d, "g.png"), os.path.join(d, "g.json")
            self.plot(sample("tm15-deep.csv"), *SAMPLE_OPTS["tm15-deep.csv"], "-o", out,
                      "--axes-json", amap)
            self.assert_gap_drawn(axes_map(amap), load_rgb(out), t[k] - t[0], t[k + 1] - t[0])

    def test_sample_tm07(self):
        # the bundled sample, rests at both ends (where the OCV hides the trace)
        t, v = read_log(sample("tm07-plain.csv"))
        self.check_trace(sample("tm07-plain.csv"), SAMPLE_OPTS["tm07-plain.csv"], t, v,
                         min_checked=150)


# ---- 4. trend and fleet ----------------------------------------------------------------------

def db_flights(db, label):
    con = sqlite3.connect(db)
    try:
        return con.execute(
            "SELECT f.flown_epoch_s, f.charge_used_mah, f.r0_mohm, f.capacity_mah, p.cells,"
            " p.capacity_mah FROM flights f JOIN packs p ON p.id = f.pack_id WHERE p.label = ?"
            " ORDER BY f.flown_epoch_s", (label,)).fetchall()
    finally:
        con.close()


class History(FigureChecks, unittest.TestCase):
    def trend(self, label, d, *extra, size=(1600, 1000), ext="png"):
        out, amap = os.path.join(d, f"{label}.{ext}"), os.path.join(d, f"{label}.{ext}.json")
        self.plot("trend", label, "-o", out, "--axes-json", amap, "--db", HIST["trend_db"], *extra)
        self.assert_figure(out, *size)
        m = axes_map(amap)
        self.assert_map_sane(m, *size, ["r0", "capacity"], ext)
        return out, m

    def check_trend_marks(self, label, png, m, by_date=False, by_month=False):
        """Each flight's R0 per cell (from the database) is a hollow #0072B2 circle, about
        6 px in radius at this size, centred where the map puts it: a pixel close to the
        colour within 9 px of that point. x is cumulative charge / rated (the axis title),
        counted to the end of each flight, or days since the first flight. The bucket's
        mean is a filled black diamond drawn over the flights, so a flight within 14 px of
        its bucket's mean (its bucket's mean x and R0 computed here; weeks are ISO weeks by
        Python's date.isocalendar) is not looked at. Returns how many were."""
        rows = db_flights(HIST["trend_db"], label)
        self.assertTrue(rows)
        pan = panel(m, "r0")
        img = load_rgb(png)
        blue = colour_mask(img, BLUE, NEAR)
        rc, out, err = pb(HIST["trend_db"], "trend", label, "--json")
        self.assertEqual(rc, EXIT_OK, err)
        cycles = json.loads(out)["equivalent_cycles"]
        q, pts = 0.0, []
        for epoch, charge, r0, cap, cells, rated in rows:
            q += charge if charge and charge > 0 else 0.0
            x = (epoch - rows[0][0]) / 86400.0 if by_date else q / rated
            self.assertTrue(pan["x"]["min"] - 1e-9 <= x <= pan["x"]["max"] + 1e-9, (x, pan["x"]))
            day = datetime.datetime.fromtimestamp(epoch, datetime.timezone.utc).date()
            bucket = (day.year, day.month) if by_month else day.isocalendar()[:2]
            if r0 is not None:
                pts.append((bucket, x, r0 / cells))
        if not by_date:
            # the last flight's x is the pack's equivalent cycles (trend --json), relative 1e-6
            self.assertAlmostEqual(q / rows[0][5], cycles, delta=1e-6 * max(cycles, 1.0))
        looked = 0
        for bucket, x, y in pts:
            self.assertTrue(pan["y"]["min"] <= y <= pan["y"]["max"], (y, pan["y"]))
            fx, fy = to_px(pan, x, y)
            same = [(a, b) for k, a, b in pts if k == bucket]
            mx, my = to_px(pan, sum(a for a, _ in same) / len(same),
                           sum(b for _, b in same) / len(same))
            if math.hypot(fx - mx, fy - my) < 14:
                continue
            looked += 1
            self.assertTrue(near(blue, fx, fy, 9), f"no R0 mark near ({x:.3f}, {y:.3f})")
        # blue in this figure: R0 marks in the r0 panel (not clipped: 10 px slack), and the
        # legend's "flight" key
        self.assert_colour_only_in(img, BLUE, pan, 10, "R0 per flight")
        return looked

    def test_trend_cells_panel(self):
        """A pack whose logs have cell columns gets a third panel: each flight's resting cell
        imbalance (the flights table's cell_spread_rest_mv) as a hollow #CC79A7 circle where
        the map puts it (within 9 px), with the retire level (60 mV, man packbook Retirement
        rules) on its axis; the stored weakest cell is the simulator's weak cell (pbsim
        --weak-cell 3: its truth), for every flight. A pack without cells keeps two panels
        (test_trend_several_flights)."""
        with tempfile.TemporaryDirectory() as d:
            db = os.path.join(d, "cells.db")
            must(pb(db, "pack", "add", "TC-1", "--cells", 4, "--chemistry", "lipo",
                    "--capacity", 2000), "pack add TC-1")
            for k in range(4):
                log = os.path.join(d, f"tc-{k}.csv")
                cmd = [PY, PBSIM, "--seed", str(SEED + 40 + k), "-o", log, "--format", "cells",
                       "--cells", "4", "--capacity-mah", "2000", "--weak-cell", "3",
                       "--duration-s", "240", "--rate-hz", "2", "--rest-end-s", "60"]
                p = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
                self.assertEqual(p.returncode, 0, p.stderr)
                must(pb(db, "import", "--pack", "TC-1", "--quiet", "--date",
                        f"2026-03-{2 + 3 * k:02d}", log), f"import flight {k}")
            out, amap = os.path.join(d, "tc.png"), os.path.join(d, "tc.png.json")
            self.plot("trend", "TC-1", "-o", out, "--axes-json", amap, "--db", db)
            m = axes_map(amap)
            self.assert_map_sane(m, 1600, 1000, ["r0", "capacity", "imbalance"])
            pan = panel(m, "imbalance")
            self.assertTrue(pan["y"]["min"] <= 60.0 <= pan["y"]["max"], pan["y"])
            con = sqlite3.connect(db)
            try:
                rows = con.execute("SELECT charge_used_mah, cell_spread_rest_mv, weakest_cell "
                                   "FROM flights ORDER BY flown_epoch_s").fetchall()
            finally:
                con.close()
            self.assertEqual([r[2] for r in rows], [3] * 4)
            purple = colour_mask(load_rgb(out), PURPLE, NEAR)
            q = 0.0
            for charge, spread, _ in rows:
                q += charge if charge and charge > 0 else 0.0
                self.assertIsNotNone(spread)
                self.assertTrue(pan["y"]["min"] <= spread <= pan["y"]["max"], (spread, pan))
                fx, fy = to_px(pan, q / 2000.0, spread)
                self.assertTrue(near(purple, fx, fy, 9), f"no imbalance mark near {spread} mV")

    def test_trend_several_flights(self):
        with tempfile.TemporaryDirectory() as d:
            png, m = self.trend("TR-MANY", d)
            rows = db_flights(HIST["trend_db"], "TR-MANY")
            self.assertEqual(len(rows), 8)
            caps = [100.0 * r[3] / r[5] for r in rows if r[3] is not None]
            self.assertTrue(caps, "the invented flights give capacity estimates")
            y = panel(m, "capacity")["y"]
            self.assertTrue(y["min"] <= min(caps) and max(caps) <= y["max"], (caps, y))
            self.assertGreaterEqual(self.check_trend_marks("TR-MANY", png, m), 4)
            for ext in ("svg", "pdf"):
                self.trend("TR-MANY", d, ext=ext)

    def test_trend_by_date_and_size(self):
        with tempfile.TemporaryDirectory() as d:
            png, m = self.trend("TR-MANY", d, "--x", "date", "--by", "month", "--size", "1200x900",
                                size=(1200, 900))
            for p in m["panels"]:
                self.assertTrue(p["x"]["dates"], p["name"])
            self.assertGreaterEqual(panel(m, "r0")["x"]["max"], 21.0 - 1e-9, "7 x 3 days")
            self.assertGreaterEqual(
                self.check_trend_marks("TR-MANY", png, m, by_date=True, by_month=True), 6)

    def test_trend_one_flight(self):
        # one flight: no line can be fitted; the figure still renders, with its mark
        with tempfile.TemporaryDirectory() as d:
            png, m = self.trend("TR-ONE", d)
            self.check_trend_marks("TR-ONE", png, m)  # its bucket's mean covers it: 0 looked at
            self.trend("TR-ONE", d, ext="svg")

    def test_trend_retired_pack(self):
        with tempfile.TemporaryDirectory() as d:
            self.trend("TR-OLD", d)

    def test_trend_no_flights(self):
        """A pack with no flights has no R0 baseline, so no R0 retirement level, and no line,
        so no projected crossing. In the R0 panel nothing may be in the retire colour, and
        the R0 axis may not go below zero; in the capacity panel that colour may only be the
        capacity rule's retire level, 80 % of rated by default (man packbook, README), a
        horizontal line (+-4 px of where the map puts 80 %)."""
        with tempfile.TemporaryDirectory() as d:
            png, m = self.trend("TR-NONE", d)
            red = colour_mask(load_rgb(png), VERMILION, NEAR)
            with self.subTest(check="R0 axis"):
                self.assertGreaterEqual(panel(m, "r0")["y"]["min"], 0.0, "an R0 axis below zero")
            with self.subTest(check="R0 panel"):
                rows, _ = np.nonzero(interior(red, panel(m, "r0"), SLACK))
                self.assertEqual(len(rows), 0, "R0 panel: a retire level or a projection drawn "
                                               "for a pack without flights")
            with self.subTest(check="capacity panel"):
                cap = panel(m, "capacity")
                _, y80 = to_px(cap, 0, 80.0)
                rows, _ = np.nonzero(interior(red, cap, SLACK))
                rows = rows + int(math.ceil(cap["top"])) + SLACK
                off = sorted({int(r) for r in rows if abs(r + 0.5 - y80) > 4})
                self.assertEqual(off[:10], [], "capacity panel: retire colour off the 80 % "
                                               "level (rows listed) for a pack without flights")

    def fleet(self, d, *extra, size=(1400, 1000), ext="png"):
        out, amap = os.path.join(d, f"fleet.{ext}"), os.path.join(d, f"fleet.{ext}.json")
        self.plot("fleet", "-o", out, "--axes-json", amap, "--db", HIST["fleet_db"], *extra)
        self.assert_figure(out, *size)
        m = axes_map(amap)
        self.assert_map_sane(m, *size, ["fleet"], ext)
        return out, m

    def fleet_json(self, *extra):
        rc, out, err = pb(HIST["fleet_db"], "fleet", "--json", *extra)
        self.assertEqual(rc, EXIT_OK, err)
        return json.loads(out)

    def placed(self, packs):
        """(id, status, x = R0 change %, y = capacity %) of the packs the figure can place
        (both known), from packbook fleet --json."""
        return [(p["id"], p["status"], (p["r0_ratio"] - 1.0) * 100.0, p["capacity_pct"])
                for p in packs if p["r0_ratio"] is not None and p["capacity_pct"] is not None]

    def test_fleet_100_packs(self):
        with tempfile.TemporaryDirectory() as d:
            packs = self.fleet_json()
            self.assertEqual(len(packs), 99, "100 packs, one retired")
            pts = self.placed(packs)
            self.assertGreater(len(pts), 80, "most packs placed")
            statuses = {s for _, s, _, _ in pts}
            self.assertTrue({"ok", "watch", "retire"} <= statuses, statuses)
            png, m = self.fleet(d)
            pan = panel(m, "fleet")
            for pid, _, x, y in pts:
                self.assertTrue(pan["x"]["min"] <= x <= pan["x"]["max"], (pid, x, pan["x"]))
                self.assertTrue(pan["y"]["min"] <= y <= pan["y"]["max"], (pid, y, pan["y"]))
            # ok packs are filled #009E73 circles (radius about 6 px here); those 100 px or
            # more from any watch or retire mark (drawn on top of them, and labelled) must
            # show their fill within 2 px of where the map puts them
            img = load_rgb(png)
            green = colour_mask(img, GREEN, NEAR)
            px = {pid: to_px(pan, x, y) for pid, _, x, y in pts}
            others = [px[pid] for pid, s, _, _ in pts if s != "ok"]
            looked = 0
            for pid, s, _, _ in pts:
                if s != "ok":
                    continue
                fx, fy = px[pid]
                if any(math.hypot(fx - a, fy - b) < 100 for a, b in others):
                    continue
                looked += 1
                self.assertTrue(near(green, fx, fy, 2),
                                f"{pid}: no ok mark at ({fx:.0f}, {fy:.0f})")
            self.assertGreater(looked, 10, "ok packs looked at")
            # labels (plot_fleet tries every pack; a crowd of 99 leaves some without room,
            # named under the plot): inside the panel and never on one another
            labels = m.get("labels", [])
            print(f"fleet of {len(pts)} placed packs: {len(labels)} labelled")
            self.assertGreater(len(labels), 20, "labels drawn")
            boxes = [(q["left"], q["top"], q["right"], q["bottom"]) for q in labels]
            for i, a in enumerate(boxes):
                self.assertTrue(pan["left"] <= a[0] and a[2] <= pan["right"], labels[i])
                self.assertTrue(pan["top"] <= a[1] and a[3] <= pan["bottom"], labels[i])
                for b in boxes[i + 1:]:
                    self.assertFalse(a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3],
                                     (labels[i], b))
            # green: ok marks (not clipped: 10 px slack) and the legend's "ok" key
            self.assert_colour_only_in(img, GREEN, pan, 10, "the ok marks")
            for ext in ("svg", "pdf"):
                self.fleet(d, ext=ext)
            self.fleet(d, "--size", "800x600", size=(800, 600))

    def test_fleet_all_draws_the_retired_pack(self):
        """--all adds the retired pack FL-050 and nothing else inside the panel: the two
        figures differ there only within 12 px of where the map puts FL-050 (a grey cross
        about 6 px in radius), in its label's box (+2 px) or within 3 px of its leader line
        (retired packs are labelled last, so the other labels stay put), and some of those
        pixels are its grey #8C8C8C."""
        with tempfile.TemporaryDirectory() as d:
            self.assertNotIn("FL-050", [p["id"] for p in self.fleet_json()])
            retired = [p for p in self.placed(self.fleet_json("--all")) if p[0] == "FL-050"]
            self.assertEqual(len(retired), 1, "FL-050 is placed with --all")
            png0, m0 = self.fleet(d)
            img0 = load_rgb(png0)
            png1, m1 = self.fleet(d, "--all")
            img1 = load_rgb(png1)
            # the legend gains a "retired" key; the panel and its axes stay the same
            strip = lambda m: [{k: v for k, v in q.items() if k != "legend"} for q in m["panels"]]
            self.assertEqual(strip(m0), strip(m1), "the retired pack lies inside the same axes")
            pan = panel(m1, "fleet")
            diff = interior((img0 != img1).any(axis=2), pan, SLACK)
            rows, cols = np.nonzero(diff)
            self.assertGreater(len(rows), 0, "--all draws the retired pack")
            fx, fy = to_px(pan, retired[0][2], retired[0][3])
            off = int(math.ceil(pan["left"])) + SLACK, int(math.ceil(pan["top"])) + SLACK
            own = [q for q in m1.get("labels", []) if q["text"].startswith("FL-050")]
            self.assertEqual([q["text"] for q in m0.get("labels", []) if q not in
                              m1.get("labels", [])], [], "the other labels stay put")

            def fl050(x, y):
                if math.hypot(x - fx, y - fy) <= 12:
                    return True
                for q in own:
                    if (q["left"] - 2 <= x <= q["right"] + 2
                            and q["top"] - 2 <= y <= q["bottom"] + 2):
                        return True
                    if "leader" in q:
                        x0, y0, x1, y1 = q["leader"]
                        t = ((x - x0) * (x1 - x0) + (y - y0) * (y1 - y0)) / max(
                            (x1 - x0) ** 2 + (y1 - y0) ** 2, 1e-9)
                        t = min(max(t, 0.0), 1.0)
                        if math.hypot(x - x0 - t * (x1 - x0), y - y0 - t * (y1 - y0)) <= 3:
                            return True
                return False
            far = [(c + off[0], r + off[1]) for r, c in zip(rows, cols)
                   if not fl050(c + off[0] + 0.5, r + off[1] + 0.5)]
            self.assertEqual(far[:10], [], f"{len(far)} px changed away from FL-050's mark")
            grey = colour_mask(img1, GREY, EXACT)
            self.assertTrue(near(grey, fx, fy, 9), "a grey mark at FL-050")

    def test_empty_fleet(self):
        with tempfile.TemporaryDirectory() as d:
            out, db = os.path.join(d, "empty.png"), os.path.join(d, "empty.db")
            # a missing database is "no history yet" (reading commands never create one)
            rc, _, err = run("plot", "fleet", "-o", out, "--db", db)
            self.assertEqual(rc, 4, err)
            self.assertIn("no history yet", err)
            self.assertFalse(os.path.exists(db))
            # a fleet whose only pack is retired: nothing in service to draw
            for args in (("pack", "add", "X", "--cells", 4, "--chemistry", "lipo", "--capacity",
                          5000), ("pack", "retire", "X", "--reason", "test")):
                rc, _, err = run(*args[:2], "--db", db, *args[2:])
                self.assertEqual(rc, 0, err)
            self.plot("fleet", "-o", out, "--db", db)
            self.assert_png(out, 1400, 1000)


# ---- 5. usage and output errors --------------------------------------------------------------

class Errors(FigureChecks, unittest.TestCase):
    LOG = sample("tm07-plain.csv")

    def expect(self, rc_want, *args):
        rc, out, err = run("plot", *args)
        self.assertEqual(rc, rc_want, f"plot {' '.join(map(str, args))}: {err}")
        self.assertEqual(out, "", "nothing on stdout")
        self.assertTrue(err.strip(), "a message on stderr")
        return err

    def test_missing_output(self):
        err = self.expect(EXIT_USAGE, self.LOG, "--cells", 4)
        self.assertIn("-o", err)

    def test_bad_extension(self):
        with tempfile.TemporaryDirectory() as d:
            for name in ("x.jpg", "x", "x.png.bak", "x.svgz", "dir.png/x"):
                with self.subTest(name=name):
                    err = self.expect(EXIT_USAGE, self.LOG, "-o", os.path.join(d, name))
                    self.assertIn(".png", err)
            self.assertEqual(os.listdir(d), [], "no file made")

    def test_bad_size(self):
        with tempfile.TemporaryDirectory() as d:
            out = os.path.join(d, "x.png")
            for size in ("479x360", "480x359", "12001x500", "500x12001", "0x0", "-800x600",
                         "800", "800x", "x600", "800x600x2", "800*600", "1e3x800", "abc"):
                with self.subTest(size=size):
                    self.expect(EXIT_USAGE, self.LOG, "-o", out, "--size", size)
            self.assertEqual(os.listdir(d), [])

    def test_trend_needs_one_id(self):
        with tempfile.TemporaryDirectory() as d:
            out = os.path.join(d, "t.png")
            self.expect(EXIT_USAGE, "trend", "-o", out, "--db", HIST["trend_db"])
            self.expect(EXIT_USAGE, "trend", "TR-ONE", "TR-MANY", "-o", out,
                        "--db", HIST["trend_db"])
            self.assertFalse(os.path.exists(out))

    def test_unknown_pack(self):
        # the same exit status as packbook trend gives an unknown pack (man: 2)
        with tempfile.TemporaryDirectory() as d:
            out = os.path.join(d, "t.png")
            rc_trend, _, _ = pb(HIST["trend_db"], "trend", "NOPE")
            self.assertEqual(rc_trend, EXIT_USAGE)
            err = self.expect(rc_trend, "trend", "NOPE", "-o", out, "--db", HIST["trend_db"])
            self.assertIn("NOPE", err)
            self.assertFalse(os.path.exists(out))
            self.assertEqual(stray_temp_files(d), [])

    def test_options_of_the_other_figures(self):
        """A history option on a flight, or an analyze option on trend or fleet: usage error,
        and the message names the option given."""
        with tempfile.TemporaryDirectory() as d:
            out = os.path.join(d, "x.png")
            cases = [((self.LOG, "--db", os.path.join(d, "x.db")), "--db"),
                     ((self.LOG, "--x", "date"), "--x"),
                     (("fleet", "--x", "date", "--db", HIST["fleet_db"]), "--x"),
                     (("fleet", "--cells", 4, "--db", HIST["fleet_db"]), "--cells"),
                     (("trend", "TR-ONE", "--capacity", 5000, "--db", HIST["trend_db"]),
                      "--capacity")]
            for args, opt in cases:
                with self.subTest(args=args):
                    err = self.expect(EXIT_USAGE, *args, "-o", out)
                    self.assertIn(opt, err)
            self.assertFalse(os.path.exists(out))

    def test_unwritable_folder(self):
        self.assertFalse(os.path.exists("/nonexistent-dir"))
        err = self.expect(EXIT_OUTPUT, self.LOG, "-o", "/nonexistent-dir/x.png")
        self.assertIn("/nonexistent-dir/x.png", err)
        self.assertFalse(os.path.exists("/nonexistent-dir"))

    def test_output_is_a_folder(self):
        # the figure is drawn, then cannot be renamed over a folder: no temporary file stays
        with tempfile.TemporaryDirectory() as d:
            target = os.path.join(d, "fig.png")
            os.mkdir(target)
            self.expect(EXIT_OUTPUT, self.LOG, "-o", target)
            self.assertTrue(os.path.isdir(target))
            self.assertEqual(os.listdir(target), [])
            self.assertEqual(stray_temp_files(d), [])

    def test_failed_write_keeps_the_old_file(self):
        """Writes beyond 20000 bytes fail (RLIMIT_FSIZE): exit 5, the file that was there is
        unchanged and no temporary file is left beside it."""
        with tempfile.TemporaryDirectory() as d:
            for ext in ("png", "svg", "pdf"):
                with self.subTest(fmt=ext):
                    target = os.path.join(d, f"fig.{ext}")
                    with open(target, "wb") as f:
                        f.write(b"the previous figure")
                    p = subprocess.run([PACKBOOK, "plot", self.LOG, "--cells", "4", "-o", target],
                                       capture_output=True, timeout=60,
                                       preexec_fn=limited_fsize(20000))
                    self.assertEqual(p.returncode, EXIT_OUTPUT, p.stderr)
                    with open(target, "rb") as f:
                        self.assertEqual(f.read(), b"the previous figure")
                    self.assertEqual(stray_temp_files(d), [])
                    fresh = os.path.join(d, f"new.{ext}")
                    p = subprocess.run([PACKBOOK, "plot", self.LOG, "--cells", "4", "-o", fresh],
                                       capture_output=True, timeout=60,
                                       preexec_fn=limited_fsize(20000))
                    self.assertEqual(p.returncode, EXIT_OUTPUT, p.stderr)
                    self.assertFalse(os.path.exists(fresh), "no half-written figure")
                    self.assertEqual(stray_temp_files(d), [])

    def test_unwritable_axes_map(self):
        with tempfile.TemporaryDirectory() as d:
            out = os.path.join(d, "x.png")
            self.expect(EXIT_OUTPUT, self.LOG, "--cells", 4, "-o", out,
                        "--axes-json", "/nonexistent-dir/a.json")
            self.assertFalse(os.path.exists(out), "no figure without its map")
            self.assertEqual(stray_temp_files(d), [])

    def test_failed_figure_keeps_the_old_axes_map(self):
        """When the figure cannot be written the command fails as a whole: the axes map
        that was there still describes the figure that is still there."""
        with tempfile.TemporaryDirectory() as d:
            out, amap = os.path.join(d, "x.png"), os.path.join(d, "x.json")
            with open(amap, "w") as f:
                f.write('{"old": true}\n')
            p = subprocess.run([PACKBOOK, "plot", self.LOG, "--cells", "4", "-o", out,
                                "--axes-json", amap], capture_output=True, timeout=60,
                               preexec_fn=limited_fsize(20000))
            self.assertEqual(p.returncode, EXIT_OUTPUT, p.stderr)
            self.assertFalse(os.path.exists(out))
            with open(amap) as f:
                self.assertEqual(f.read(), '{"old": true}\n', "axes map rewritten for a "
                                                             "figure that was not written")


# ---- 6. analyze --plot and trend --plot --------------------------------------------------

class Shortcuts(FigureChecks, unittest.TestCase):
    """The figure of 'packbook plot' (same pixels, as the --plot help says), with the
    report on stdout exactly as without --plot."""

    def same_pixels(self, a, b):
        with Image.open(a) as ia, Image.open(b) as ib:
            self.assertEqual(ia.size, ib.size)
            self.assertTrue(np.array_equal(np.asarray(ia.convert("RGB")),
                                           np.asarray(ib.convert("RGB"))),
                            f"{a} and {b} differ")

    def test_flight_of_a_registered_pack(self):
        """plot LOG --pack ID takes the pack's cells, chemistry and capacity from the history
        and names it in the title: the same pixels as giving those by hand with the title
        "ID · log" (the pack is registered here with tm12's own values, invented for the
        test)."""
        log = sample("tm12-cells.csv")
        with tempfile.TemporaryDirectory() as d:
            db = os.path.join(d, "h.db")
            rc, _, err = pb(db, "pack", "add", "RB-01", "--cells", 6, "--chemistry", "lihv",
                            "--capacity", 4200)
            self.assertEqual(rc, EXIT_OK, err)
            a, b = os.path.join(d, "a.png"), os.path.join(d, "b.png")
            self.plot(log, "--pack", "RB-01", "--db", db, "-o", a)
            self.plot(log, "--cells", 6, "--chemistry", "lihv", "--capacity", 4200,
                      "--title", "RB-01 \u00b7 tm12-cells.csv", "-o", b)
            self.same_pixels(a, b)
            # a different capacity draws a different figure (the check can fail)
            c = os.path.join(d, "c.png")
            self.plot(log, "--cells", 6, "--chemistry", "lihv", "--capacity", 3000,
                      "--title", "RB-01 \u00b7 tm12-cells.csv", "-o", c)
            with Image.open(a) as ia, Image.open(c) as ic:
                self.assertFalse(np.array_equal(np.asarray(ia), np.asarray(ic)))
            for args, status in (((log, "--pack", "RB-01", "--cells", 6), EXIT_USAGE),
                                 ((log, "--pack", "NOPE"), EXIT_USAGE),
                                 ((log, "--cells", 6), EXIT_USAGE),  # --db without --pack
                                 (("fleet", "--pack", "RB-01"), EXIT_USAGE)):
                with self.subTest(args=args):
                    out = os.path.join(d, "x.png")
                    rc, _, err = pb(db, "plot", *args, "-o", out)
                    self.assertEqual(rc, status, err)
                    self.assertFalse(os.path.exists(out))

    def test_analyze_plot(self):
        log, opts = sample("tm12-cells.csv"), SAMPLE_OPTS["tm12-cells.csv"]
        with tempfile.TemporaryDirectory() as d:
            for extra in ((), ("--json",)):
                with self.subTest(args=extra):
                    rc, plain, err = run("analyze", log, *opts, *extra)
                    self.assertEqual(rc, EXIT_OK, err)
                    fig = os.path.join(d, "a.png")
                    rc, out, err = run("analyze", log, *opts, *extra, "--plot", fig)
                    self.assertEqual(rc, EXIT_OK, err)
                    self.assertEqual(out, plain, "the report is unchanged by --plot")
                    if extra:
                        json.loads(out)
                    self.assert_png(fig, 1600, 1300)
                    ref = os.path.join(d, "ref.png")
                    self.plot(log, *opts, "-o", ref)
                    self.same_pixels(fig, ref)
            svg = os.path.join(d, "a.svg")
            rc, _, err = run("analyze", log, *opts, "--plot", svg)
            self.assertEqual(rc, EXIT_OK, err)
            self.assert_svg(svg, 1600, 1300)
            rc, _, _ = run("analyze", log, *opts, "--plot", os.path.join(d, "a.jpg"))
            self.assertEqual(rc, EXIT_USAGE)
            rc, _, _ = run("analyze", log, *opts, "--plot", "/nonexistent-dir/a.png")
            self.assertEqual(rc, EXIT_OUTPUT)
            self.assertEqual(sorted(os.listdir(d)), ["a.png", "a.svg", "ref.png"])

    def test_trend_plot(self):
        db = HIST["trend_db"]
        with tempfile.TemporaryDirectory() as d:
            for extra in ((), ("--json",)):
                with self.subTest(args=extra):
                    rc, plain, err = pb(db, "trend", "TR-MANY", *extra)
                    self.assertEqual(rc, EXIT_OK, err)
                    fig = os.path.join(d, "t.png")
                    rc, out, err = pb(db, "trend", "TR-MANY", *extra, "--plot", fig)
                    self.assertEqual(rc, EXIT_OK, err)
                    self.assertEqual(out, plain, "the report is unchanged by --plot")
                    self.assert_png(fig, 1600, 1000)
                    ref = os.path.join(d, "ref.png")
                    self.plot("trend", "TR-MANY", "-o", ref, "--db", db)
                    self.same_pixels(fig, ref)
            rc, _, _ = pb(db, "trend", "TR-MANY", "--plot", os.path.join(d, "t.gif"))
            self.assertEqual(rc, EXIT_USAGE)
            rc, _, _ = pb(db, "trend", "NOPE", "--plot", os.path.join(d, "n.png"))
            self.assertEqual(rc, EXIT_USAGE)
            self.assertFalse(os.path.exists(os.path.join(d, "n.png")))


class DrawingLibrary(unittest.TestCase):
    """cairo is loaded when a figure is started (dlopen of libcairo.so.2), not linked, so the
    commands that draw nothing do not map it (README, "Libraries")."""

    def test_not_linked(self):
        p = subprocess.run(["ldd", PACKBOOK], capture_output=True, text=True)
        self.assertEqual(p.returncode, 0, p.stderr)
        self.assertNotIn("libcairo", p.stdout)
        self.assertNotIn("libfontconfig", p.stdout)

    @unittest.skipUnless(shutil.which("cc"), "no C compiler to make a stand-in library")
    def test_missing_library_is_a_clear_error(self):
        with tempfile.TemporaryDirectory() as d:
            # a libcairo.so.2 without cairo's functions, found first through LD_LIBRARY_PATH
            src = os.path.join(d, "empty.c")
            with open(src, "w") as f:
                f.write("int packbook_stand_in;\n")
            subprocess.run(["cc", "-shared", "-fPIC", "-o", os.path.join(d, "libcairo.so.2"),
                            src], check=True)
            env = dict(os.environ, LD_LIBRARY_PATH=d)
            log = sample("tm07-plain.csv")
            fig = os.path.join(d, "f.png")
            p = subprocess.run([PACKBOOK, "plot", log, "-o", fig], capture_output=True,
                               text=True, env=env, timeout=60)
            self.assertEqual(p.returncode, EXIT_OUTPUT, p.stderr)  # man: 5, output not written
            self.assertIn("cannot load the drawing library", p.stderr)
            self.assertIn("has no cairo_", p.stderr)
            self.assertIn("install Debian's libcairo2", p.stderr)
            self.assertFalse(os.path.exists(fig), "nothing half-written")
            # analysing needs none of it
            p = subprocess.run([PACKBOOK, "analyze", log, "--json"], capture_output=True,
                               text=True, env=env, timeout=60)
            self.assertEqual(p.returncode, EXIT_OK, p.stderr)
            self.assertIn("charge_used_mah", p.stdout)


if __name__ == "__main__":
    unittest.main(verbosity=2)
