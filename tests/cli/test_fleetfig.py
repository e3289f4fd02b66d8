#!/usr/bin/python3
"""plot fleet labels every pack and draws the registered pairs (issue 15).

Eight 4S LiPo packs simulated with scripts/pbsim.py (fixed seeds 900-923), three flights each,
rated 5000 mAh, true capacities 5000, 4990, 4975, 4960, 4950, 4700, 4300 and 4150 mAh, R0 4.0 mOhm
per cell: after three flights every pack's R0 is its baseline, so the five near 5000 mAh crowd
together at the same x. PK-1 is paired with PK-5 (1 % apart: within pairs.h's limits) and PK-6
with PK-8 (12 % apart: drifted, so both are flagged watch with the pair as the reason).

Checked at the default size (1400x1000) and the smallest (480x360), from the axes map's labels
(their ink boxes with the halo, as drawn) and the fleet's own JSON:
- every placed pack has exactly one label, starting with its ID, and naming the mark where the
  map's axes put that pack (within 0.5 px);
- no two labels overlap, no label overlaps a mark's box (half-side 0.45 x the figure's base font,
  the mark's drawn radius at its default style) other than its own, and every label lies inside
  the plot area;
- a label away from its mark has a leader line from the mark to the label's box;
- the drifted packs' labels say so ("pair with PK-8 drifted"), and the pair lines are drawn: the
  drifted pair's purple (#CC79A7, Okabe-Ito, plot.h) dashes along the line joining PK-6 and PK-8,
  the other pair's blue (#0072B2) between PK-1 and PK-5 (pixel colours within 40 per channel:
  antialiasing).
"""
import concurrent.futures
import datetime
import json
import math
import os
import subprocess
import sys

import numpy as np
from PIL import Image

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from pbtest import PACKBOOK, PBSIM, PY, run, temp_dir  # noqa: E402

CAPS = [5000, 4990, 4975, 4960, 4950, 4700, 4300, 4150]
PURPLE = (0xCC, 0x79, 0xA7)
BLUE = (0x00, 0x72, 0xB2)


def sim(path, seed, cap, start):
    args = [PY, PBSIM, "--packbook", PACKBOOK, "-o", path, "--seed", seed, "--cells", 4,
            "--chemistry", "lipo", "--capacity-mah", cap, "--r0-mohm-cell", "4.0", "--soc0", "97",
            "--hover-a", 20, "--duration-s", 540, "--rate-hz", 1, "--start-epoch",
            int(start.timestamp()), "--format", "epoch"]
    subprocess.run([str(a) for a in args], check=True, capture_output=True)


def overlap(a, b):
    return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]


def to_px(pan, x, y):
    ax, ay = pan["x"], pan["y"]
    fx = pan["left"] + (x - ax["min"]) / (ax["max"] - ax["min"]) * (pan["right"] - pan["left"])
    fy = pan["bottom"] - (y - ay["min"]) / (ay["max"] - ay["min"]) * (pan["bottom"] - pan["top"])
    return fx, fy


def colour_near(img, rgb, fx, fy, reach):
    r, c = int(fy), int(fx)
    win = img[max(r - reach, 0):r + reach + 1, max(c - reach, 0):c + reach + 1]
    return bool((np.abs(win - np.array(rgb)).max(axis=2) <= 40).any())


def check_figure(db, d, size, fleet):
    w, h = size
    out, amap = os.path.join(d, f"fleet-{w}.png"), os.path.join(d, f"fleet-{w}.json")
    rc, _, err = run("plot", "fleet", "-o", out, "--axes-json", amap, "--size", f"{w}x{h}",
                     "--db", db)
    assert rc == 0, err
    m = json.load(open(amap))
    pan = [p for p in m["panels"] if p["name"] == "fleet"][0]
    font = max(9.0, min(min(w, h) / 58.0, 64.0))  # plot.c: the figure's base font
    half = 0.45 * font - 0.5
    marks = {p["id"]: to_px(pan, (p["r0_ratio"] - 1.0) * 100.0, p["capacity_pct"])
             for p in fleet}
    labels = m.get("labels", [])
    print(f"{w}x{h}: {len(labels)} labels for {len(marks)} packs;",
          sum("leader" in l for l in labels), "with a leader line")
    owner = {}
    for lab in labels:
        pid = lab["text"].split(" ")[0]
        assert pid in marks and pid not in owner, (pid, lab)
        owner[pid] = lab
        fx, fy = marks[pid]
        assert abs(lab["mark_x"] - fx) <= 0.5 and abs(lab["mark_y"] - fy) <= 0.5, (lab, fx, fy)
        box = (lab["left"], lab["top"], lab["right"], lab["bottom"])
        assert pan["left"] <= box[0] and box[2] <= pan["right"], (lab, pan)
        assert pan["top"] <= box[1] and box[3] <= pan["bottom"], (lab, pan)
        for other, (ox, oy) in marks.items():
            if other != pid:
                assert not overlap(box, (ox - half, oy - half, ox + half, oy + half)), \
                    (lab["text"], other)
        # beside its mark (within 2 fonts of it) or joined to it by a leader line
        nx, ny = min(max(fx, box[0]), box[2]), min(max(fy, box[1]), box[3])
        if math.hypot(nx - fx, ny - fy) > 2.0 * font:
            assert "leader" in lab, lab
            x0, y0, x1, y1 = lab["leader"]
            assert math.hypot(x0 - fx, y0 - fy) <= font and math.hypot(x1 - nx, y1 - ny) <= 1, lab
    assert sorted(owner) == sorted(marks), (sorted(owner), sorted(marks))
    for i, a in enumerate(labels):
        for b in labels[i + 1:]:
            ba = (a["left"], a["top"], a["right"], a["bottom"])
            bb = (b["left"], b["top"], b["right"], b["bottom"])
            assert not overlap(ba, bb), (a["text"], b["text"])
    for pid in ("PK-6", "PK-8"):
        other = "PK-8" if pid == "PK-6" else "PK-6"
        assert f"pair with {other} drifted" in owner[pid]["text"], owner[pid]
    with Image.open(out) as im:
        img = np.asarray(im.convert("RGB"), dtype=np.int16)
    (ax, ay), (bx, by) = marks["PK-6"], marks["PK-8"]
    steps = [0.2 + 0.6 * k / 19 for k in range(20)]
    hits = sum(colour_near(img, PURPLE, ax + t * (bx - ax), ay + t * (by - ay), 2) for t in steps)
    assert hits >= 8, f"drifted pair line: purple at {hits} of 20 points along it"
    (ax, ay), (bx, by) = marks["PK-1"], marks["PK-5"]
    if math.hypot(bx - ax, by - ay) > 4 * font:  # visible beyond the two marks
        assert colour_near(img, BLUE, (ax + bx) / 2, (ay + by) / 2, 2), "pair line PK-1 PK-5"
    return len(labels)


def main():
    tmp = temp_dir("pb-fleetfig-")
    db = os.path.join(tmp, "fleetfig.db")
    start0 = datetime.datetime(2026, 4, 6, 9, 0, tzinfo=datetime.timezone.utc)
    jobs = []
    for i, cap in enumerate(CAPS):
        label = f"PK-{i + 1}"
        rc, out, err = run("pack", "add", label, "--cells", 4, "--chemistry", "lipo",
                           "--capacity", 5000, "--db", db)
        assert rc == 0, err
        os.makedirs(os.path.join(tmp, label))
        for k in range(3):
            jobs.append((os.path.join(tmp, label, f"f{k}.csv"), 900 + 3 * i + k, cap,
                         start0 + datetime.timedelta(days=k, hours=i)))
    print("seeds 900-923")
    with concurrent.futures.ThreadPoolExecutor(2) as ex:
        list(ex.map(lambda j: sim(*j), jobs))
    for i in range(len(CAPS)):
        label = f"PK-{i + 1}"
        rc, out, err = run("import", "--pack", label, "--db", db, "--quiet",
                           os.path.join(tmp, label))
        assert rc == 0, err
    for a, b in (("PK-1", "PK-5"), ("PK-6", "PK-8")):
        rc, out, err = run("pack", "pair", a, b, "--db", db)
        assert rc == 0, err
    rc, out, err = run("fleet", "--json", "--db", db)
    assert rc == 0, err
    fleet = json.loads(out)
    assert len(fleet) == len(CAPS) and all(p["capacity_pct"] and p["r0_ratio"] for p in fleet)
    for size in ((1400, 1000), (480, 360)):
        assert check_figure(db, tmp, size, fleet) == len(CAPS)
    print("fleetfig: all checks passed")
    return 0


if __name__ == "__main__":
    sys.exit(main())
