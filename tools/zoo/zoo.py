#!/usr/bin/env python3
"""zoo.py: generate drawn plants x the fault set, run `efftemp replay` on each, score the alerts.

    python3 tools/zoo/zoo.py --efftemp target/release/efftemp --plants 20 --out target/zoo
    python3 tools/zoo/zoo.py --efftemp target/release/efftemp --quick --out target/zoo-quick
    python3 tools/zoo/zoo.py --score-only --out target/zoo      # re-score finished runs

Needs Python 3.11+ with numpy and scipy (`pip install numpy scipy`). See tools/zoo/README.md for
what is drawn, the fault set and the scoring definitions.
"""
from __future__ import annotations

import argparse
import datetime as dt
import glob
import json
import os
import subprocess
import sys
import time
from concurrent.futures import ProcessPoolExecutor, as_completed

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
import plants  # noqa: E402

CAUSES = ["heater_fouling", "conversion_drift", "instrument_fault", "heat_loss", "data_quality",
          "model_validity", "undetermined"]
INSTRUMENT_KINDS = ["effluent_ti_bias", "feed_ti_bias", "flow_stuck", "flow_drift", "analyzer_frozen"]
GAP_GRACE_MIN = 60  # a data_quality alert raised up to this long after a recorded gap ends is the gap's


# ----------------------------------------------------------------------------------------------
# Running
# ----------------------------------------------------------------------------------------------
def run_one(task):
    efftemp, out, seed, plant_index, kind = task
    t0 = time.time()
    run_id = plants.make_run(out, seed, plant_index, kind, plants.FAULT_KINDS.index(kind))
    if run_id is None:
        return {"skipped": True, "plant": plant_index, "kind": kind, "reason": "no analyzer to freeze"}
    d = os.path.join(out, "runs", run_id)
    site = os.path.join(d, "site.toml")
    res = {"run_id": run_id, "plant": plant_index, "kind": kind, "gen_s": round(time.time() - t0, 2)}
    chk = subprocess.run([efftemp, "check", "--config", site], capture_output=True, text=True)
    res["check_ok"] = chk.returncode == 0 and "configuration OK" in chk.stdout
    if not res["check_ok"]:
        res["error"] = "check: " + (chk.stdout + chk.stderr).strip()[:2000]
        return res
    t1 = time.time()
    rep = subprocess.run([efftemp, "replay", "--config", site, "--log-format", "json"], capture_output=True, text=True)
    res["replay_s"] = round(time.time() - t1, 2)
    res["replay_rc"] = rep.returncode
    res["replay_summary"] = (rep.stdout.strip().splitlines() or [""])[-1][:300]
    if rep.returncode != 0:
        res["error"] = "replay: " + (rep.stdout + rep.stderr).strip()[-2000:]
        return res
    with open(os.path.join(d, "result.json"), "w") as fh:
        json.dump(res, fh, indent=1)
    return res


def read_events(run_dir):
    ev = []
    for p in sorted(glob.glob(os.path.join(run_dir, "output", "*", "alerts-*.jsonl"))):
        with open(p) as fh:
            for line in fh:
                line = line.strip()
                if line:
                    ev.append(json.loads(line))
    ev.sort(key=lambda e: (e["time"], e.get("sequence", 0)))
    return ev


# ----------------------------------------------------------------------------------------------
# Scoring one run
# ----------------------------------------------------------------------------------------------
def minutes(t, start):
    return (dt.datetime.fromisoformat(t) - start).total_seconds() / 60.0


def base_tag(subject):
    return (subject or "").split(":")[0]


def score_run(run_dir):
    with open(os.path.join(run_dir, "truth.json")) as fh:
        truth = json.load(fh)
    f = truth["fault"]
    plant = truth["plant"]
    start = dt.datetime.fromisoformat(truth["start"].replace("Z", "+00:00"))
    events = read_events(run_dir)
    for e in events:
        e["_t"] = minutes(e["time"], start)
    gaps = truth["gaps"]

    def gap_explained(e):
        if e["cause"] != "data_quality":
            return False
        for g in gaps:
            if g["start_min"] - 1 <= e["_t"] <= g["end_min"] + GAP_GRACE_MIN:
                if g["what"] == "rows" or base_tag(e.get("subject")) in g["tags"]:
                    return True
        return False

    raised = [e for e in events if e["event"] == "raised"]
    counted = [e for e in raised if not gap_explained(e)]
    n_gap = len(raised) - len(counted)
    days = truth["minutes"] / 1440.0
    on = f["onset_min"]
    out = {"run_id": truth["run_id"], "kind": f["kind"], "family": plant["family"], "plant": plant["index"],
           "effluent_analyzer": plant["effluent_analyzer"],
           "feed_analyzer": any(fd["analyzer"] for fd in plant["feeds"]), "ambient_tag": plant["has_ambient"],
           "dynamics_configured": plant["knows_dynamics"],
           "n_feeds": len(plant["feeds"]), "days": days, "gap_alerts": n_gap, "events": len(events)}
    if on is None:
        out["false"] = [{"t_min": e["_t"], "cause": e["cause"], "subject": e.get("subject")} for e in counted]
        out["false_days"] = days
        if plant["effluent_analyzer"]:
            out["scatter_ratio"] = scatter_ratio(run_dir)
        return out
    pre = [e for e in counted if e["_t"] < on]
    out["false"] = [{"t_min": e["_t"], "cause": e["cause"], "subject": e.get("subject")} for e in pre]
    out["false_days"] = on / 1440.0
    w_end = f.get("removal_min", f["end_min"])
    win = [e for e in counted if on <= e["_t"] <= w_end]
    mat = f["material_min"]
    out.update(onset_min=on, material_min=mat, window_end_min=w_end, expected=f["expected_causes"], fault_tags=f["tags"])
    out["detected"] = bool(win)
    if win:
        first = win[0]
        out["first"] = {"t_min": first["_t"], "cause": first["cause"], "subject": first.get("subject")}
        out["delay_h"] = (first["_t"] - mat) / 60.0
        out["right_cause_first"] = first["cause"] in f["expected_causes"]
        ever = [e for e in win if e["cause"] in f["expected_causes"]]
        out["right_cause_ever"] = bool(ever)
        if ever:
            out["right_cause_delay_h"] = (ever[0]["_t"] - mat) / 60.0
        if "cycle_min" in f:
            out["delay_cycles"] = (first["_t"] - mat) / f["cycle_min"]
    else:
        out["right_cause_first"] = False
        out["right_cause_ever"] = False
    out["causes_in_window"] = sorted({e["cause"] for e in win})
    # The ranking's first cause, as the alerts carry it (also under `undetermined`).
    ranked = []
    for e in events:
        cp = (e.get("evidence") or {}).get("cause_probabilities")
        if e["event"] in ("raised", "updated") and cp and on <= e["_t"] <= w_end:
            ranked.append((e["_t"], max(cp, key=cp.get)))
    right = [t for t, c in ranked if c in f["expected_causes"]]
    if right:
        out["ranked_right_delay_h"] = (right[0] - mat) / 60.0
    if f["kind"] in INSTRUMENT_KINDS:
        named = [e for e in win if base_tag(e.get("subject")) in plant["tags"]]
        out["tag_named"] = base_tag(named[0].get("subject")) if named else None
        out["right_tag"] = bool(named) and base_tag(named[0].get("subject")) in f["tags"]
    if "removal_min" in f:
        rem = f["removal_min"]
        active = {}
        for e in events:
            if e["_t"] > rem:
                break
            if (e["event"] == "raised" and on <= e["_t"] and not gap_explained(e)
                    and (e["cause"] in f["expected_causes"] or base_tag(e.get("subject")) in f["tags"])):
                active[e["alert_id"]] = e
            elif e["event"] == "cleared":
                active.pop(e["alert_id"], None)
        if active:
            cleared = {e["alert_id"] for e in events if e["event"] == "cleared" and rem < e["_t"] <= rem + 60}
            out["active_at_removal"] = len(active)
            out["cleared_1h"] = all(a in cleared for a in active)
        after = [e for e in counted if rem < e["_t"]]
        out["raised_after_removal"] = [{"t_min": e["_t"], "cause": e["cause"], "subject": e.get("subject")} for e in after]
    return out


def scatter_ratio(run_dir):
    """Median over 2-h windows of std(predicted) / std(measured) effluent temperature, each about
    its own straight line through the window (the slow process movements both see are taken
    out; what is left is each one's own scatter)."""
    import csv
    import glob
    import numpy as np
    rows = []
    for path in sorted(glob.glob(os.path.join(run_dir, "output", "*", "softtags-*.csv"))):
        with open(path) as fh:
            for r in csv.DictReader(fh):
                try:
                    rows.append((float(r["predicted_temperature"]), float(r["measured_temperature"])))
                except (ValueError, KeyError):
                    rows.append(None)
    ratios = []
    for i in range(0, len(rows) - 120, 120):
        w = rows[i:i + 120]
        if any(x is None for x in w):
            continue
        t = np.arange(len(w))
        p = np.array([x[0] for x in w])
        m = np.array([x[1] for x in w])
        sp = np.std(p - np.polyval(np.polyfit(t, p, 1), t))
        sm = np.std(m - np.polyval(np.polyfit(t, m, 1), t))
        if sm > 0:
            ratios.append(sp / sm)
    return float(np.median(ratios)) if ratios else None


# ----------------------------------------------------------------------------------------------
# Tables
# ----------------------------------------------------------------------------------------------
def pct(n, d):
    return f"{100.0 * n / d:.0f} % ({n}/{d})" if d else "n/a"


def quantile(xs, q):
    xs = sorted(xs)
    if not xs:
        return None
    pos = (len(xs) - 1) * q
    lo, hi = int(pos), min(int(pos) + 1, len(xs) - 1)
    return xs[lo] + (xs[hi] - xs[lo]) * (pos - lo)


def fmt_h(x):
    return "–" if x is None else f"{x:.1f}"


def aggregate(results):
    kinds = [k for k in plants.FAULT_KINDS if k != "none"]
    agg = {"faults": {}, "false": {}, "by_family": {}}
    for k in kinds:
        rs = [r for r in results if r["kind"] == k]
        det = [r for r in rs if r["detected"]]
        delays = [r["delay_h"] for r in det]
        firsts = {}
        for r in det:
            firsts[r["first"]["cause"]] = firsts.get(r["first"]["cause"], 0) + 1
        a = {"runs": len(rs), "detected": len(det),
             "median_delay_h": quantile(delays, 0.5), "p90_delay_h": quantile(delays, 0.9),
             "right_cause_first": sum(r["right_cause_first"] for r in rs),
             "median_right_cause_delay_h": quantile([r["right_cause_delay_h"] for r in rs if "right_cause_delay_h" in r], 0.5),
             "right_cause_ever": sum(r["right_cause_ever"] for r in rs),
             "right_cause_24h": sum(1 for r in rs if r.get("right_cause_delay_h") is not None and r["right_cause_delay_h"] <= 24.0),
             "ranked_right_24h": sum(1 for r in rs if any(r.get(k) is not None and r[k] <= 24.0
                                                         for k in ("ranked_right_delay_h", "right_cause_delay_h"))),
             "first_causes": dict(sorted(firsts.items(), key=lambda kv: -kv[1])),
             "expected": plants.EXPECTED_CAUSE[k]}
        if k in INSTRUMENT_KINDS:
            a["tag_named"] = sum(1 for r in rs if r.get("tag_named"))
            a["right_tag"] = sum(1 for r in rs if r.get("right_tag"))
        if k in ("effluent_ti_bias", "feed_ti_bias"):
            act = [r for r in rs if "active_at_removal" in r]
            a["active_at_removal"] = len(act)
            a["cleared_1h"] = sum(1 for r in act if r["cleared_1h"])
        if k == "analyzer_frozen":
            cyc = [r["delay_cycles"] for r in det if "delay_cycles" in r]
            a["within_3_cycles"] = sum(1 for c in cyc if c <= 3)
        agg["faults"][k] = a
    for label, rs in (("fault-free runs", [r for r in results if r["kind"] == "none"]),
                      ("fault runs before onset", [r for r in results if r["kind"] != "none"])):
        days = sum(r["false_days"] for r in rs)
        by = {c: 0 for c in CAUSES}
        for r in rs:
            for e in r["false"]:
                by[e["cause"]] = by.get(e["cause"], 0) + 1
        agg["false"][label] = {"runs": len(rs), "plant_days": days, "count": by,
                               "per_plant_day": {c: (v / days if days else None) for c, v in by.items()},
                               "total": sum(by.values()), "total_per_plant_day": sum(by.values()) / days if days else None,
                               "gap_data_quality": sum(r["gap_alerts"] for r in rs if r["kind"] == "none") if label.startswith("fault-free")
                               else sum(r["gap_alerts"] for r in rs)}
    sr = [r["scatter_ratio"] for r in results if r.get("scatter_ratio") is not None]
    agg["scatter"] = {"runs": len(sr), "median": quantile(sr, 0.5), "worst": max(sr) if sr else None,
                      "within_1_5": sum(1 for x in sr if x <= 1.5)}
    for fam in plants.FAMILIES:
        rs = [r for r in results if r["family"] == fam and r["kind"] != "none"]
        ff = [r for r in results if r["family"] == fam and r["kind"] == "none"]
        days = sum(r["false_days"] for r in ff)
        agg["by_family"][fam] = {
            "fault_runs": len(rs), "detected": sum(r["detected"] for r in rs),
            "right_cause_first": sum(r["right_cause_first"] for r in rs),
            "right_cause_ever": sum(r["right_cause_ever"] for r in rs),
            "fault_free_days": days, "false_alerts": sum(len(r["false"]) for r in ff)}
    agg["by_configuration"] = {}
    for key, label in (("dynamics_configured", "dynamics configured"), ("effluent_analyzer", "effluent analyzer"),
                       ("feed_analyzer", "a feed analyzer"), ("ambient_tag", "ambient tag")):
        for val in (True, False):
            rs = [r for r in results if r[key] == val and r["kind"] != "none"]
            ff = [r for r in results if r[key] == val and r["kind"] == "none"]
            days = sum(r["false_days"] for r in ff)
            agg["by_configuration"][f"{label}: {'yes' if val else 'no'}"] = {
                "fault_runs": len(rs), "detected": sum(r["detected"] for r in rs),
                "right_cause_first": sum(r["right_cause_first"] for r in rs),
                "right_cause_ever": sum(r["right_cause_ever"] for r in rs),
                "fault_free_days": days, "false_alerts": sum(len(r["false"]) for r in ff)}
    return agg


def tables(agg, meta):
    L = []
    a = L.append
    a(f"# efftemp plant zoo scores\n")
    a(f"efftemp: `{meta['efftemp']}` ({meta.get('efftemp_version', '?')}); zoo seed {meta['seed']}, "
      f"{meta['plants']} plants, {meta['runs']} runs, {meta['plant_days']:.0f} plant-days of 1-min rows; "
      f"generated {meta['when']}; wall time {meta['wall_s']:.0f} s.\n")
    a("Delays in hours from the moment the fault became material (fouling: 5 % effectiveness lost; "
      "conversion: shifted by 0.05; thermometer bias, stuck meter, frozen analyzer, heat-loss step: onset; "
      "drifting meter: 2 % of reading); negative = raised before that moment. The first alert is the first "
      "raised after onset (data_quality alerts at a recorded data gap are not counted anywhere).\n")
    a("## Faults\n")
    a("| fault | runs | detected | median delay h | p90 delay h | right cause first | right cause ever | right cause ≤ 24 h | ranked first ≤ 24 h | median delay to right cause h | right tag | cleared ≤ 1 h after removal | first causes |")
    a("|---|---|---|---|---|---|---|---|---|---|---|---|---|")
    for k, s in agg["faults"].items():
        rt = pct(s["right_tag"], s["runs"]) if "right_tag" in s else "–"
        cl = pct(s["cleared_1h"], s["active_at_removal"]) if "cleared_1h" in s else "–"
        fc = ", ".join(f"{c} {n}" for c, n in s["first_causes"].items()) or "–"
        a(f"| {k} | {s['runs']} | {pct(s['detected'], s['runs'])} | {fmt_h(s['median_delay_h'])} | "
          f"{fmt_h(s['p90_delay_h'])} | {pct(s['right_cause_first'], s['runs'])} | {pct(s['right_cause_ever'], s['runs'])} | "
          f"{pct(s['right_cause_24h'], s['runs'])} | "
          f"{pct(s['ranked_right_24h'], s['runs']) if k in ('fouling', 'conversion_up', 'conversion_down', 'heat_loss') else '–'} | "
          f"{fmt_h(s['median_right_cause_delay_h'])} | "
          f"{rt} | {cl} | {fc} |")
    fz = agg["faults"].get("analyzer_frozen")
    if fz and fz["runs"]:
        a(f"\nFrozen analyzer detected within three analyzer cycles of onset: {pct(fz['within_3_cycles'], fz['runs'])}.")
    a("\nExpected causes: fouling → heater_fouling; conversion → conversion_drift; thermometer bias, stuck or "
      "drifting flow meter → instrument_fault; frozen analyzer → instrument_fault or data_quality; heat loss → heat_loss. "
      "Ranked first (slow process faults): the alert named the right cause, or its ranking (evidence `cause_probabilities`, "
      "carried also by `undetermined`) put the right cause first, within 24 h. Right tag: the first alert after onset that names one of the plant's tags names the faulty one (% of all runs). "
      "Cleared: every alert raised during the bias with the expected cause or naming the faulty tag, and still active at "
      "its removal, clears within 1 h (of runs with such an alert).\n")
    sc = agg.get("scatter")
    if sc and sc["runs"]:
        a("Predicted-temperature scatter with an effluent analyzer (fault-free runs; std of the predicted over std of "
          "the measured effluent temperature about a line through each 2-h window, median of the windows): "
          f"median {sc['median']:.2f}, worst {sc['worst']:.2f}, ≤ 1.5 in {pct(sc['within_1_5'], sc['runs'])}.\n")
    a("## False alerts per plant-day\n")
    a("| period | runs | plant-days | " + " | ".join(CAUSES) + " | total | data_quality at recorded gaps (not counted) |")
    a("|---|---|---|" + "---|" * len(CAUSES) + "---|---|")
    for label, s in agg["false"].items():
        cells = " | ".join(f"{s['per_plant_day'][c]:.3f} ({s['count'][c]})" if s["plant_days"] else "–" for c in CAUSES)
        tot = f"{s['total_per_plant_day']:.3f} ({s['total']})" if s["plant_days"] else "–"
        a(f"| {label} | {s['runs']} | {s['plant_days']:.1f} | {cells} | {tot} | {s['gap_data_quality']} |")
    for title, key, col in (("By family", "by_family", "family"), ("By plant configuration", "by_configuration", "plants with")):
        a(f"\n## {title}\n")
        a(f"| {col} | fault runs | detected | right cause first | right cause ever | fault-free plant-days | false alerts (fault-free) |")
        a("|---|---|---|---|---|---|---|")
        for name, s in agg[key].items():
            a(f"| {name} | {s['fault_runs']} | {pct(s['detected'], s['fault_runs'])} | {pct(s['right_cause_first'], s['fault_runs'])} | "
              f"{pct(s['right_cause_ever'], s['fault_runs'])} | {s['fault_free_days']:.1f} | {s['false_alerts']} |")
    return "\n".join(L) + "\n"


# ----------------------------------------------------------------------------------------------
def main():
    ap = argparse.ArgumentParser(description="efftemp plant zoo: drawn plants x faults, replayed and scored")
    ap.add_argument("--efftemp", default="target/release/efftemp", help="the efftemp binary to score")
    ap.add_argument("--plants", type=int, default=20, help="number of drawn plants (default 20)")
    ap.add_argument("--quick", action="store_true", help="smoke run: 4 plants")
    ap.add_argument("--seed", type=int, default=1, help="zoo seed (default 1)")
    ap.add_argument("--jobs", type=int, default=2, help="parallel processes (default 2)")
    ap.add_argument("--out", default="target/zoo", help="output folder (runs/, scores.md, scores.json)")
    ap.add_argument("--faults", default=",".join(plants.FAULT_KINDS), help="comma-separated subset of the fault set")
    ap.add_argument("--score-only", action="store_true", help="score the runs already in OUT/runs")
    a = ap.parse_args()
    n_plants = 4 if a.quick else a.plants
    kinds = [k for k in a.faults.split(",") if k]
    for k in kinds:
        if k not in plants.FAULT_KINDS:
            ap.error(f"unknown fault {k!r}; known: {', '.join(plants.FAULT_KINDS)}")
    out = os.path.abspath(a.out)
    os.makedirs(os.path.join(out, "runs"), exist_ok=True)
    efftemp = os.path.abspath(a.efftemp)
    t0 = time.time()
    errors = []
    skipped = []
    if not a.score_only:
        if not os.access(efftemp, os.X_OK):
            ap.error(f"{efftemp} is not an executable (build it with `cargo build --release`)")
        tasks = [(efftemp, out, a.seed, p, k) for p in range(n_plants) for k in kinds]
        done = 0
        with ProcessPoolExecutor(max_workers=a.jobs) as ex:
            futs = [ex.submit(run_one, t) for t in tasks]
            for fu in as_completed(futs):
                r = fu.result()
                done += 1
                if r.get("skipped"):
                    skipped.append(r)
                elif "error" in r:
                    errors.append(r)
                    print(f"[{done}/{len(tasks)}] {r['run_id']}: ERROR {r['error'][:300]}", file=sys.stderr)
                if done % 10 == 0 or done == len(tasks):
                    print(f"[{done}/{len(tasks)}] {time.time() - t0:.0f} s", file=sys.stderr)
    run_dirs = sorted(d for d in glob.glob(os.path.join(out, "runs", "*")) if os.path.exists(os.path.join(d, "result.json")))
    if not a.score_only:
        wanted = {f"p{p:02d}-{k}" for p in range(n_plants) for k in kinds}
        run_dirs = [d for d in run_dirs if os.path.basename(d) in wanted]
    results = [score_run(d) for d in run_dirs]
    agg = aggregate(results)
    ver = subprocess.run([efftemp, "--version"], capture_output=True, text=True).stdout.strip() if os.access(efftemp, os.X_OK) else "?"
    meta = {"efftemp": os.path.relpath(efftemp) if not a.score_only else a.efftemp, "efftemp_version": ver,
            "seed": a.seed, "plants": len({r["plant"] for r in results}), "runs": len(results),
            "plant_days": sum(r["days"] for r in results), "when": dt.datetime.now().strftime("%Y-%m-%d %H:%M"),
            "wall_s": time.time() - t0, "errors": [{"run_id": e["run_id"], "error": e["error"]} for e in errors],
            "skipped": skipped, "command": " ".join(sys.argv)}
    md = tables(agg, meta)
    if errors:
        md += f"\n{len(errors)} run(s) failed (check or replay): " + ", ".join(e["run_id"] for e in errors) + "\n"
    if skipped:
        md += f"\nNot drawn: {len(skipped)} analyzer_frozen run(s) on plants without an analyzer.\n"
    print(md)
    with open(os.path.join(out, "scores.md"), "w") as fh:
        fh.write(md)
    with open(os.path.join(out, "scores.json"), "w") as fh:
        json.dump({"meta": meta, "summary": agg, "runs": results}, fh, indent=1)
    return 1 if errors else 0


if __name__ == "__main__":
    sys.exit(main())
