#!/usr/bin/env python3
"""Digest of everything efftemp writes for three fixed workloads, to show that a change which
should not change behaviour (a refactoring, a speed-up) leaves the outputs byte-identical.

Workloads (all deterministic for a given binary):
  demo    `efftemp demo --seed 2026` (the embedded plant with its injected faults, live service)
  replay  `efftemp replay` of the demo's exports with the demo's site file
  year    `efftemp replay` of a year of generated 1-minute wide exports (20 columns) with shift
          reports on, with a thermometer step, a meter step, a stuck flow, a slow duty-meter
          drift and a data gap written into the data

Every output file (soft tags, alert JSON lines, ingest counters, shift reports) is hashed.
One field is normalised before hashing: the shift report's "records read" cell of the live demo,
which counts the records read on the shift's days *so far* and so depends on how the live
service's passes fell in wall time (two runs of the same binary differ there). Everything else
must be equal to the byte.

Usage:
  python3 tools/same-outputs/digest.py --efftemp target/release/efftemp --work /tmp/w1 > a.txt
  python3 tools/same-outputs/digest.py --efftemp /path/to/other/efftemp --work /tmp/w2 > b.txt
  diff a.txt b.txt        # empty: byte-identical outputs
"""

import argparse
import hashlib
import math
import os
import re
import shutil
import subprocess
import sys
from datetime import datetime, timedelta, timezone

RECORDS_READ = re.compile(rb"(records read[^<]*</th><td>)[0-9]+(</td>)")


def digest_tree(label, root, normalise_records=False):
    lines = []
    for dirpath, _, files in os.walk(root):
        for name in files:
            path = os.path.join(dirpath, name)
            with open(path, "rb") as f:
                data = f.read()
            if normalise_records and name.endswith(".html"):
                data = RECORDS_READ.sub(rb"\1N\2", data)
            rel = os.path.relpath(path, root)
            lines.append(f"{label} {rel} {len(data)} {hashlib.sha256(data).hexdigest()[:16]}")
    lines.sort()
    return lines


TAGS = ["FI-101", "TI-102", "JI-103", "TI-109", "PI-110", "TI-001"] + [f"XX-{201 + j}" for j in range(14)]


def generate_year(d, days):
    """A year of wide 1-minute rows. The physics is a plain heat balance of mostly water: what
    matters here is that the data are fixed and exercise the monitor, not that they are a plant."""
    os.makedirs(d, exist_ok=True)
    t0 = datetime(2026, 1, 1, tzinfo=timezone.utc)
    for day in range(days):
        start = t0 + timedelta(days=day)
        path = os.path.join(d, start.strftime("plant_%Y%m%d.csv"))
        out = ["Timestamp," + ",".join(TAGS)]
        for m in range(1440):
            k = day * 1440 + m
            # a data gap of six hours on day 40
            if day == 40 and 600 <= m < 960:
                continue
            t = start + timedelta(minutes=m)
            f = 10.0 + 0.5 * math.sin(k / 300.0) + (0.8 if (k // 4000) % 2 else 0.0)
            tin = 30.0 + 0.2 * math.sin(k / 77.0) + 3.0 * math.sin(2 * math.pi * k / 1440.0)
            q = 30.0 + 1.0 * math.cos(k / 500.0) + (2.0 if (k // 4000) % 2 else 0.0)
            tout = tin + q * 1000.0 / (f * 75.4)
            noise = 0.05 * math.sin(k * 12.9898) * math.sin(k * 78.233)
            tout += noise
            if day == 100 and 300 <= m < 660:
                tout += 2.0  # thermometer calibration step for 6 h
            flow = f
            if day == 150 and 0 <= m < 240:
                flow = 10.0  # stuck flow transmitter for 4 h
            duty = q
            if day >= 250:
                duty = q * (1.0 + 0.004 * (day - 250 + m / 1440.0))  # duty meter reads high
            if day == 300 and 720 <= m < 1080:
                duty = q * 1.06  # meter step for 6 h
            cells = [
                t.strftime("%Y-%m-%dT%H:%M:%SZ"),
                f"{flow:.4f}",
                f"{tin:.3f}",
                f"{duty:.3f}",
                f"{tout:.3f}",
                "2.5",
                f"{12.0 + 4.0 * math.sin(2 * math.pi * k / 1440.0):.2f}",
            ]
            cells += [f"{100.0 + j + math.sin(k / (50.0 + j)):.3f}" for j in range(14)]
            out.append(",".join(cells))
        with open(path, "w") as fh:
            fh.write("\n".join(out) + "\n")


YEAR_SITE = """[site]
name = "digest"
time_zone = "Europe/Berlin"
state_dir = "state"
output_dir = "output"
[service]
watch = "off"
[[unit]]
name = "B-1"
[unit.input]
directory = "{exports}"
pattern = "plant_*.csv"
timestamp_column = "Timestamp"
unknown_tags = "ignore"
[unit.timing]
interval = "1m"
max_wait = "3m"
[[unit.feed]]
flow = {{ tag = "FI-101", unit = "mol/s", uncertainty = "1 %" }}
temperature = {{ tag = "TI-102", unit = "degC", uncertainty = "0.5 K" }}
composition = {{ water = 0.97, methanol = 0.03 }}
[unit.heater]
duty = {{ tag = "JI-103", unit = "kW", uncertainty = "2 %" }}
[unit.effluent]
temperature = {{ tag = "TI-109", unit = "degC", uncertainty = "0.3 K" }}
[unit.model]
pressure = {{ tag = "PI-110", unit = "bar" }}
[unit.ambient]
temperature = {{ tag = "TI-001", unit = "degC" }}
[unit.monitor]
dead_time = "1m"
lag = "2m"
"""


def run(cmd, cwd=None):
    r = subprocess.run(cmd, cwd=cwd, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    if r.returncode != 0:
        sys.stderr.write(r.stderr.decode(errors="replace"))
        raise SystemExit(f"failed ({r.returncode}): {' '.join(cmd)}")
    return r.stdout.decode(errors="replace")


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--efftemp", required=True)
    ap.add_argument("--work", required=True, help="scratch directory (emptied first)")
    ap.add_argument("--days", type=int, default=365, help="days of the year workload")
    ap.add_argument("--skip", action="append", default=[], choices=["demo", "replay", "year"])
    a = ap.parse_args()
    exe = os.path.abspath(a.efftemp)
    work = os.path.abspath(a.work)
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    lines = []
    demo = os.path.join(work, "demo")
    if "demo" not in a.skip or "replay" not in a.skip:
        out = run([exe, "demo", "--seed", "2026", "--out", demo])
        if "demo" not in a.skip:
            score = out[out.index("Scorecard"):out.index("Files (kept")]
            lines += [f"demo-scorecard {s}" for s in score.strip().splitlines()]
            lines += digest_tree("demo", os.path.join(demo, "output"), normalise_records=True)
    if "replay" not in a.skip:
        out = run([exe, "replay", "--config", os.path.join(demo, "site.toml"), "--output",
                   os.path.join(work, "demo-replay")])
        lines.append("replay-summary " + out.strip().splitlines()[-1])
        lines += digest_tree("replay", os.path.join(work, "demo-replay"))
    if "year" not in a.skip:
        exports = os.path.join(work, "year-exports")
        generate_year(exports, a.days)
        site = os.path.join(work, "year-site.toml")
        with open(site, "w") as fh:
            fh.write(YEAR_SITE.format(exports=exports))
        out = run([exe, "replay", "--config", site, "--output", os.path.join(work, "year-out")])
        lines.append("year-summary " + out.strip().splitlines()[-1])
        lines += digest_tree("year", os.path.join(work, "year-out"))
    print("\n".join(lines))


if __name__ == "__main__":
    main()
