#!/usr/bin/env python3
"""Start `efftemp run` on a backlog and watch it as systemd would.

Writes UNITS units x DAYS days of 1-minute wide exports (one file per unit and day), starts the
release binary with NOTIFY_SOCKET and WATCHDOG_USEC set to a socket of its own, polls /readyz and
/metrics, sends SIGTERM after --run seconds and prints: time to READY, the longest gap between
watchdog keep-alives, checkpoints written while catching up, the /readyz text, and how long the
SIGTERM took. Nothing here is a test: it measures what issue #15 item 5 asks for.

    python3 tools/backlog-probe.py --efftemp target/release/efftemp --units 50 --days 60 --run 30
"""

import argparse
import math
import os
import signal
import socket
import subprocess
import tempfile
import time
import urllib.request

HEADER = "Timestamp,FI-101,TI-102,JI-103,TI-109\n"
BASE = 1_796_083_200 - 60 * 86_400  # 60 days before 2026-12-01T00:00:00Z


def rows(day):
    out = []
    for m in range(1440):
        t = day * 86_400 + m * 60
        f = 10.0 + 0.5 * ((t // 600) % 3)
        tin = 30.0 + 0.1 * ((t // 60) % 7)
        q = 30.0
        tout = tin + q * 1000.0 / (f * 75.4)
        ts = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(BASE + t))
        out.append(f"{ts},{f:.3f},{tin:.3f},{q:.3f},{tout:.3f}\n")
    return "".join(out)


UNIT = """
[[unit]]
name = "U-{k:03}"
[unit.input]
directory = "exports/u{k:03}"
pattern = "plant_*.csv"
timestamp_column = "Timestamp"
[unit.timing]
interval = "1m"
max_wait = "3m"
[[unit.feed]]
flow = {{ tag = "FI-101", unit = "mol/s", uncertainty = "1 %" }}
temperature = {{ tag = "TI-102", unit = "degC", uncertainty = "0.5 K" }}
composition = {{ water = 1.0 }}
[unit.heater]
duty = {{ tag = "JI-103", unit = "kW", uncertainty = "2 %" }}
[unit.effluent]
temperature = {{ tag = "TI-109", unit = "degC", uncertainty = "0.3 K" }}
"""


def get(port, path):
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}{path}", timeout=2) as r:
            return r.status, r.read().decode()
    except urllib.error.HTTPError as e:
        return e.code, e.read().decode()
    except OSError as e:
        return 0, str(e)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--efftemp", default="target/release/efftemp")
    ap.add_argument("--units", type=int, default=50)
    ap.add_argument("--days", type=int, default=60)
    ap.add_argument("--run", type=float, default=30.0, help="seconds before SIGTERM")
    ap.add_argument("--no-reports", action="store_true", help="shift_reports = false")
    ap.add_argument("--watchdog", type=float, default=30.0, help="WatchdogSec of the unit")
    a = ap.parse_args()
    root = tempfile.mkdtemp(prefix="efftemp-backlog-")
    day_text = [rows(d) for d in range(a.days)]
    for k in range(a.units):
        d = os.path.join(root, "exports", f"u{k:03}")
        os.makedirs(d)
        for day in range(a.days):
            name = time.strftime("plant_%Y%m%d.csv", time.gmtime(BASE + day * 86_400))
            with open(os.path.join(d, name), "w") as f:
                f.write(HEADER + day_text[day])
            old = time.time() - 86_400 * (a.days - day)
            os.utime(os.path.join(d, name), (old, old))
    port = 19_464
    with open(os.path.join(root, "site.toml"), "w") as f:
        reports = "false" if a.no_reports else "true"
        f.write(f"""[site]
name = "backlog probe"
time_zone = "UTC"
state_dir = "state"
output_dir = "output"
shift_reports = {reports}

[service]
watch = "off"
reconcile_interval = "2s"
http_address = "127.0.0.1:{port}"
""")
        for k in range(a.units):
            f.write(UNIT.format(k=k))
    total = sum(os.path.getsize(os.path.join(dp, n)) for dp, _, ns in os.walk(os.path.join(root, "exports")) for n in ns)
    sock_path = os.path.join(root, "notify.sock")
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    sock.bind(sock_path)
    sock.settimeout(0.05)
    env = dict(os.environ, NOTIFY_SOCKET=sock_path, WATCHDOG_USEC=str(int(a.watchdog * 1e6)))
    t0 = time.monotonic()
    p = subprocess.Popen([a.efftemp, "run", "--log-format", "json", "--log-level", "warn", "--config",
                          os.path.join(root, "site.toml")], env=env, stdout=subprocess.DEVNULL,
                         stderr=open(os.path.join(root, "stderr.log"), "w"))
    ready = None
    caught_up = None
    pings = []
    readyz = []
    ckpt = []
    last_probe = 0.0
    while time.monotonic() - t0 < a.run:
        try:
            msg = sock.recv(4096).decode()
            now = time.monotonic() - t0
            if "READY=1" in msg and ready is None:
                ready = (now, msg.replace("\n", " | "))
            if "WATCHDOG=1" in msg:
                pings.append(now)
            if "STATUS=watching" in msg and caught_up is None and ready is not None:
                caught_up = now
        except socket.timeout:
            pass
        if time.monotonic() - last_probe > 1.0:
            last_probe = time.monotonic()
            code, body = get(port, "/readyz")
            readyz.append((round(last_probe - t0, 1), code, body.strip()))
            _, m = get(port, "/metrics")
            for line in m.splitlines():
                if line.startswith("efftemp_checkpoint_writes_total"):
                    ckpt.append(int(line.split()[-1]))
    _, metrics = get(port, "/metrics")
    t_term = time.monotonic()
    p.send_signal(signal.SIGTERM)
    code = p.wait()
    term = time.monotonic() - t_term
    gaps = [b - a_ for a_, b in zip(pings, pings[1:])]
    print(f"backlog: {a.units} units x {a.days} days, {total / 2**20:.0f} MiB of exports in {root}")
    print(f"READY after {ready[0]:.3f} s: {ready[1]}" if ready else "no READY")
    print(f"watchdog keep-alives: {len(pings)}, longest gap {max(gaps) if gaps else math.nan:.2f} s "
          f"(WatchdogSec {a.watchdog:g} s, pings due every {a.watchdog / 2:g} s)")
    print(f"caught up after {caught_up:.1f} s" if caught_up else "still catching up at SIGTERM")
    print(f"checkpoints written while running: {ckpt[-1] if ckpt else 0}")
    for r in readyz[:2] + readyz[-1:]:
        print(f"/readyz at {r[0]} s: {r[1]} {r[2]}")
    for line in metrics.splitlines():
        if line.startswith(("efftemp_catching_up", "efftemp_backlog_bytes{unit=\"U-000\"}", "efftemp_passes_total")):
            print("metrics:", line)
    print(f"SIGTERM after {a.run:g} s: exit {code} in {term:.3f} s")


if __name__ == "__main__":
    main()
