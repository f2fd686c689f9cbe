#!/usr/bin/env python3
"""Cross-check `efftemp calc CASE.toml --json` against an independent Python model (model.py),
including the first-order uncertainty budget (model.uncertainty, compared in compare_uncertainty).

    python3 tools/xcheck/xcheck.py --efftemp target/release/efftemp [--n 360] [--n-unc 180] [--seed 20240611]

Writes every generated case to <out>/cases/, a machine-readable summary to <out>/summary.json and
every disagreement (case TOML, our value, efftemp's value) to <out>/disagreements.txt.
Exit status 0 when no disagreement was found, 1 otherwise.
"""
from __future__ import annotations

import argparse
import copy
import json
import math
import os
import random
import subprocess
import sys
import tomllib
from collections import defaultdict

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import model  # noqa: E402
from model import UNITS, CaseError, norm_id  # noqa: E402

REF_DIR = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "tests", "fixtures", "reference")

# tolerances (brief)
TOL_T = 1e-4          # K, effluent temperature and bubble point
TOL_REL = 1e-6        # duty, conversion, flows
TOL_X = 1e-9          # effluent mole fractions, absolute
TOL_H_REL = 1e-9      # enthalpy flows, relative to the feed enthalpy magnitude (extra)

# --------------------------------------------------------------------------------------------
# TOML writer (enough for case files)
# --------------------------------------------------------------------------------------------

def tval(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        assert math.isfinite(v)
        r = repr(v)
        return r if ("." in r or "e" in r) else r + ".0"
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, list):
        return "[" + ", ".join(tval(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{tkey(k)} = {tval(x)}" for k, x in v.items()) + " }"
    raise TypeError(v)


def tkey(k):
    import re
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else json.dumps(k)


def to_toml(case):
    out = []
    if "comment" in case:
        out += ["# " + line for line in case["comment"].splitlines()] + [""]
    for cid, tbl in case.get("components", {}).items():
        out.append(f"[components.{tkey(cid)}]")
        out += [f"{tkey(k)} = {tval(v)}" for k, v in tbl.items()]
        out.append("")
    for sec in ("model",):
        if sec in case:
            out.append(f"[{sec}]")
            out += [f"{tkey(k)} = {tval(v)}" for k, v in case[sec].items()]
            out.append("")
    for arr in ("feed", "reaction"):
        for tbl in case.get(arr, []):
            out.append(f"[[{arr}]]")
            out += [f"{tkey(k)} = {tval(v)}" for k, v in tbl.items()]
            out.append("")
    for sec in ("effluent", "heater", "solve"):
        if sec in case:
            out.append(f"[{sec}]")
            out += [f"{tkey(k)} = {tval(v)}" for k, v in case[sec].items()]
            out.append("")
    return "\n".join(out)


def strip_meta(case):
    return {k: v for k, v in case.items() if k not in ("comment", "category", "name", "expect")}


# --------------------------------------------------------------------------------------------
# quantities written with units
# --------------------------------------------------------------------------------------------

def sig(x, n=7):
    return float(f"{x:.{n}g}")


def with_unit(rng, si_value, quantity, unit=None, p_plain=0.25):
    """Express an SI value either as a plain number or as '<num> <unit>' in a random unit."""
    if unit is None:
        if rng.random() < p_plain:
            return sig(si_value, 9)
        unit = rng.choice(sorted(UNITS[quantity]))
    f, o = UNITS[quantity][unit]
    num = sig((si_value - o) / f, 8)
    return f"{num:.10g} {unit}"


# --------------------------------------------------------------------------------------------
# case generator
# --------------------------------------------------------------------------------------------
LIB = model.library()
ALL_IDS = sorted(LIB)
REACTIONS = {
    "R1": ({"methyl-acetate": -1, "water": -1, "acetic-acid": 1, "methanol": 1}, "methyl-acetate"),
    "R2": ({"ethyl-acetate": -1, "water": -1, "acetic-acid": 1, "ethanol": 1}, "ethyl-acetate"),
    "R3": ({"ethylene-oxide": -1, "water": -1, "ethylene-glycol": 1}, "ethylene-oxide"),
}
ENTHALPY = ["auto", "ideal-gas-watson", "liquid-cp"]


def id_styler(rng):
    style = rng.choice(["hy", "us", "us", "cap"])
    def f(cid):
        if style == "hy":
            return cid
        if style == "us":
            return cid.replace("-", "_")
        return cid.replace("-", "_").title() if not cid[0].isdigit() else cid.upper().replace("-", "_")
    return f


def rand_fracs(rng, ids, dominant=None, ndp=None):
    w = {c: rng.uniform(0.05, 1.0) for c in ids}
    if dominant and dominant in w:
        w[dominant] += rng.uniform(1.5, 4.0) * len(ids)
    s = sum(w.values())
    x = {c: v / s for c, v in w.items()}
    if ndp is not None:
        x = {c: round(v, ndp) for c, v in x.items()}
        # fix the last one so the sum is exactly ~1
        last = list(x)[-1]
        x[last] = round(1.0 - sum(v for c, v in x.items() if c != last), ndp)
        if x[last] <= 0:
            return rand_fracs(rng, ids, dominant, ndp)
    return x


def liquid_floor(ids):
    """The lowest start of the liquid correlation ranges (cp_liq, psat) of the components in a
    feed: efftemp refuses a feed colder than that as not liquid (a pure acetic acid feed below
    289.81 K), so valid cases are drawn above it (100 K for a component without either range)."""
    per = [min([LIB[c][k][0] for k in ("cp_liq_range", "psat_range") if k in LIB.get(c, {})] or [100.0])
           for c in ids]
    return min(per, default=100.0)


def make_feeds(rng, comp_sets, S, temp_range=(285.0, 390.0), water_dominant=True):
    feeds = []
    for i, ids in enumerate(comp_sets):
        basis = rng.choice(["mole", "mole", "mass"])
        ndp = rng.choice([None, 4, 6])
        x = rand_fracs(rng, ids, "water" if water_dominant else None, ndp)
        T = rng.uniform(max(temp_range[0], liquid_floor(ids) + 0.5), temp_range[1])
        flow_mol = rng.uniform(0.3, 60.0)
        if rng.random() < 0.45:
            # mass flow: approximate kg/s for this feed
            mbar = sum(v * LIB[c]["molar_mass"] for c, v in x.items()) / 1000.0
            flow = with_unit(rng, flow_mol * mbar, "mass_flow", p_plain=0.0)
        else:
            flow = with_unit(rng, flow_mol, "molar_flow", p_plain=0.3)
        f = {}
        if rng.random() < 0.3:
            f["name"] = f"feed {i + 1}"
        f["flow"] = flow
        f["temperature"] = with_unit(rng, T, "temperature", p_plain=0.3)
        f["composition"] = {S(c): v for c, v in x.items()}
        if basis == "mass" or rng.random() < 0.2:
            f["basis"] = basis
        feeds.append(f)
    return feeds


def model_section(rng, S, ids, pressure_p=0.7):
    m = {}
    r = rng.random()
    if r < 0.55:
        m["enthalpy"] = rng.choice(ENTHALPY)
    if rng.random() < 0.2:
        ov = rng.sample(ids, k=min(len(ids), rng.randint(1, 2)))
        m["component_enthalpy"] = {S(c): rng.choice(["ideal-gas-watson", "liquid-cp", "auto"]) for c in ov}
    if rng.random() < 0.2:
        m["watson_n"] = round(rng.uniform(0.32, 0.42), 3)
    if rng.random() < pressure_p:
        m["pressure"] = with_unit(rng, rng.uniform(1.0e5, 2.5e6), "pressure", p_plain=0.2)
    return m


def duty_needed(case, T_target):
    """Our model's duty to reach T_target (used only to choose sensible generated inputs)."""
    c = copy.deepcopy(strip_meta(case))
    c.setdefault("effluent", {})["temperature"] = T_target
    c.setdefault("heater", {}).pop("duty", None)
    c["solve"] = {"unknown": "duty"}
    return model.calc(c)["duty_w"]


def gen_reacting(rng, unknown, n_feeds=None):
    S = id_styler(rng)
    rx_names = rng.sample(sorted(REACTIONS), k=rng.choice([1, 1, 1, 2]))
    ids = ["water"]
    for r in rx_names:
        for c in REACTIONS[r][0]:
            if c not in ids:
                ids.append(c)
    # feed components: reactants + some products + maybe an inert
    keys = [REACTIONS[r][1] for r in rx_names]
    extra = [c for c in ids if c not in keys and c != "water" and rng.random() < 0.5]
    if rng.random() < 0.3:
        inert = rng.choice([c for c in ALL_IDS if c not in ids])
        extra.append(inert)
    feed_ids = ["water"] + keys + extra
    feed_ids = feed_ids[:6]
    nf = n_feeds or rng.randint(1, 3)
    sets = [feed_ids]
    for _ in range(nf - 1):
        sets.append(rng.choice([["water"], feed_ids, ["water"] + keys[:1], [rng.choice(feed_ids)]]))
    feeds = make_feeds(rng, sets, S)
    m = model_section(rng, S, feed_ids)
    rxs = []
    for r in rx_names:
        nu, key = REACTIONS[r]
        rx = {"stoichiometry": {S(c): v for c, v in nu.items()}, "key": S(key),
              "conversion": round(rng.uniform(0.05, 0.97), 4)}
        rxs.append(rx)
    case = {"model": m, "feed": feeds, "reaction": rxs, "heater": {}}
    if not m:
        del case["model"]
    if rng.random() < 0.5:
        case["heater"]["heat_loss"] = with_unit(rng, rng.uniform(0, 2e4), "heat_flow", p_plain=0.3)
    T_target = rng.uniform(300.0, 420.0)
    solved_rx = None
    if unknown == "conversion":
        solved_rx = rng.randrange(len(rxs))
    Q = duty_needed(case, T_target)
    if unknown == "temperature":
        case["heater"]["duty"] = with_unit(rng, Q, "heat_flow", p_plain=0.3)
        if rng.random() < 0.3:
            case["effluent"] = {"temperature": with_unit(rng, T_target + rng.uniform(-3, 3), "temperature")}
    else:
        case["effluent"] = {"temperature": with_unit(rng, T_target, "temperature", p_plain=0.3)}
        if unknown == "duty":
            pass
        else:
            case["heater"]["duty"] = with_unit(rng, Q * rng.uniform(0.97, 1.03) + rng.uniform(-500, 500),
                                               "heat_flow", p_plain=0.3)
            del rxs[solved_rx]["conversion"]
        case["solve"] = {"unknown": unknown}
    if unknown == "temperature" and rng.random() < 0.3:
        case["solve"] = {"unknown": "temperature"}
    if not case["heater"]:
        del case["heater"]
    return case


def gen_measured(rng, unknown):
    """feeds + measured effluent composition (no reactions)."""
    S = id_styler(rng)
    r = rng.choice(sorted(REACTIONS))
    nu, key = REACTIONS[r]
    feed_ids = ["water", key] + [c for c in nu if c not in ("water", key) and rng.random() < 0.4]
    nf = rng.randint(1, 3)
    sets = [feed_ids] + [rng.choice([["water"], feed_ids]) for _ in range(nf - 1)]
    feeds = make_feeds(rng, sets, S)
    m = model_section(rng, S, list(nu))
    case = {"model": m, "feed": feeds, "heater": {}}
    # "true" effluent by our model from a conversion, then perturbed like an analyzer reading
    tmp = copy.deepcopy(case)
    tmp["reaction"] = [{"stoichiometry": {S(c): v for c, v in nu.items()}, "key": S(key),
                        "conversion": rng.uniform(0.1, 0.9)}]
    tmp["heater"]["duty"] = 0.0
    res = model.calc(tmp)
    x = {c: v * rng.uniform(0.97, 1.03) for c, v in res["effluent_composition"].items() if v > 0}
    eff = {}
    basis = rng.choice(["mole", "mole", "mass"])
    if basis == "mass":
        w = {c: v * LIB[c]["molar_mass"] for c, v in x.items()}
        x = w
        eff["basis"] = "mass"
    s = sum(x.values())
    x = {c: v / s for c, v in x.items()}
    if rng.random() < 0.5:
        x = {c: round(v, 4) for c, v in x.items()}
        eff["normalize"] = True
    eff["composition"] = {S(c): v for c, v in x.items()}
    case["effluent"] = eff
    if not m:
        del case["model"]
    if rng.random() < 0.5:
        case["heater"]["heat_loss"] = with_unit(rng, rng.uniform(0, 1e4), "heat_flow", p_plain=0.3)
    T_target = rng.uniform(300.0, 410.0)
    Q = duty_needed(case, T_target)
    if unknown == "temperature":
        case["heater"]["duty"] = with_unit(rng, Q, "heat_flow", p_plain=0.3)
    else:
        eff["temperature"] = with_unit(rng, T_target, "temperature", p_plain=0.3)
        case["solve"] = {"unknown": "duty"}
    if not case["heater"]:
        del case["heater"]
    return case


def gen_mixture(rng, unknown):
    """non-reacting mixtures of 1-6 library components."""
    S = id_styler(rng)
    k = rng.randint(1, 6)
    ids = rng.sample(ALL_IDS, k)
    nf = rng.randint(1, 3)
    sets = [ids] + [rng.sample(ids, rng.randint(1, len(ids))) for _ in range(nf - 1)]
    feeds = make_feeds(rng, sets, S, water_dominant=False)
    m = model_section(rng, S, ids)
    case = {"model": m, "feed": feeds, "heater": {}}
    if not m:
        del case["model"]
    if rng.random() < 0.4:
        case["heater"]["heat_loss"] = with_unit(rng, rng.uniform(0, 1e4), "heat_flow", p_plain=0.3)
    # ideal-gas path must stay below the lowest Tc
    T_target = rng.uniform(290.0, 440.0)
    Q = duty_needed(case, T_target)
    if unknown == "temperature":
        case["heater"]["duty"] = with_unit(rng, Q, "heat_flow", p_plain=0.3)
    else:
        case["effluent"] = {"temperature": with_unit(rng, T_target, "temperature", p_plain=0.3)}
        case["solve"] = {"unknown": "duty"}
    if not case["heater"]:
        del case["heater"]
    return case


def gen_inline(rng, unknown):
    """inline [components.x]: overrides of library fields or wholly new components."""
    base = gen_reacting(rng, unknown, n_feeds=rng.randint(1, 2)) if rng.random() < 0.5 else None
    if base is None:
        base = gen_mixture(rng, unknown)
    ids = []
    for f in base["feed"]:
        for c in f["composition"]:
            if norm_id(c) not in ids:
                ids.append(norm_id(c))
    comps = {}
    style_of = {}
    for f in base["feed"]:
        for c in f["composition"]:
            style_of[norm_id(c)] = c
    # 1) overrides of existing library components
    for c in rng.sample(ids, k=min(len(ids), rng.randint(1, 2))):
        ov = {}
        choice = rng.sample(["watson_n", "hvap_tb", "hf_liq", "hf_ig", "tc", "cp_liq", "molar_mass"],
                            k=rng.randint(1, 3))
        lib = LIB[c]
        for key in choice:
            if key == "watson_n":
                ov[key] = round(rng.uniform(0.3, 0.45), 3)
            elif key in ("hvap_tb", "hf_liq", "hf_ig"):
                ov[key] = with_unit(rng, lib[key] * rng.uniform(0.98, 1.02), "molar_energy", p_plain=0.4)
            elif key == "tc":
                ov[key] = round(lib["tc"] + rng.uniform(-5, 5), 2)
            elif key == "cp_liq":
                ov[key] = [v * rng.uniform(0.97, 1.03) for v in lib["cp_liq"]]
            elif key == "molar_mass":
                ov[key] = with_unit(rng, lib["molar_mass"] * rng.uniform(0.999, 1.001), "molar_mass")
        comps[style_of[c]] = ov
    # 2) a new solvent component, added to the first feed
    if rng.random() < 0.7:
        name = rng.choice(["solvent_x", "Heavy-Ester", "inert_oil", "tracer"])
        tb = rng.uniform(330, 480)
        tc = tb * rng.uniform(1.4, 1.6)
        new = {
            "molar_mass": with_unit(rng, rng.uniform(40, 180), "molar_mass"),
            "tb": round(tb, 2),
            "tc": round(tc, 2),
            "hvap_tb": with_unit(rng, rng.uniform(25e3, 55e3), "molar_energy", p_plain=0.5),
            "hf_ig": with_unit(rng, rng.uniform(-5e5, -1e5), "molar_energy", p_plain=0.5),
            "cp_ig": [rng.uniform(20, 80), rng.uniform(0.05, 0.3), rng.uniform(-1e-4, 1e-4), 0.0, 0.0],
        }
        if rng.random() < 0.5:
            new["watson_n"] = round(rng.uniform(0.33, 0.42), 3)
        if rng.random() < 0.5:
            new["hf_liq"] = -abs(float(model.conv(new["hf_ig"], "molar_energy")[0])) - rng.uniform(2e4, 6e4)
            new["cp_liq"] = [rng.uniform(100, 250), rng.uniform(-0.2, 0.3), 0.0, 0.0, 0.0]
        psat_kind = rng.choice(["dippr", "lk", "none"])
        if psat_kind == "dippr":
            # a DIPPR-101 (C3 = C4 = 0, i.e. Clausius-Clapeyron) line through (tb, 1 atm)
            B = -rng.uniform(3500, 6000)
            new["psat"] = [math.log(101325.0) - B / tb, B, 0.0, 0.0, 1.0]
        elif psat_kind == "lk":
            new["pc"] = round(rng.uniform(2.5e6, 6e6), 0)
            new["omega"] = round(rng.uniform(0.2, 0.6), 4)
        comps[name] = new
        f0 = base["feed"][0]
        comp0 = f0["composition"]
        share = rng.uniform(0.02, 0.2)
        for k in list(comp0):
            comp0[k] = comp0[k] * (1 - share)
        comp0[name] = share
        f0["normalize"] = True
        # keep the case sensible: re-target the duty for the new mixture
        T_target = rng.uniform(300.0, 400.0)
        base["components"] = comps
        if unknown == "temperature":
            base.setdefault("heater", {})["duty"] = sig(duty_needed(base, T_target), 9)
        elif unknown == "conversion":
            base.setdefault("effluent", {})["temperature"] = round(T_target, 3)
            d = duty_needed({**base, "reaction": [{**r, "conversion": 0.5} for r in base["reaction"]]},
                            T_target)
            base["heater"]["duty"] = sig(d, 9)
        else:
            base.setdefault("effluent", {})["temperature"] = round(T_target, 3)
    base["components"] = comps
    return base



DEG = {  # diethylene glycol, C4H10O3 (CRC Handbook-type values; inline component for 2 EO + H2O -> DEG)
    "formula": "C4H10O3", "molar_mass": 106.1204, "tb": 519.0, "tc": 744.6, "pc": 4.6e6, "omega": 0.69,
    "hvap_tb": "52.3 kJ/mol", "hf_ig": "-571.2 kJ/mol", "hf_liq": "-628.5 kJ/mol",
    "cp_ig": [25.0, 0.35, -1.5e-4, 0.0, 0.0], "cp_liq": [150.0, 0.35, 0.0, 0.0, 0.0],
}


def gen_stoich(rng, unknown):
    """reactions whose key coefficient is not -1: 2 EO + H2O -> DEG (key EO, nu = -2, or key water),
    and the R1-R3 reactions scaled by 0.5 or 2."""
    S = id_styler(rng)
    if rng.random() < 0.5:
        nu = {"ethylene-oxide": -2, "water": -1, "diethylene-glycol": 1}
        key = rng.choice(["ethylene-oxide", "water"])
        comps = {"diethylene_glycol": dict(DEG)}
        feed_ids = ["water", "ethylene-oxide"] + (["ethylene-glycol"] if rng.random() < 0.5 else [])
        dom = "water" if key == "ethylene-oxide" else "ethylene-oxide"
    else:
        r = rng.choice(sorted(REACTIONS))
        f = rng.choice([0.5, 2.0, 1.5])
        nu0, key = REACTIONS[r]
        nu = {c: v * f for c, v in nu0.items()}
        comps = {}
        feed_ids = ["water", key]
        dom = "water"
    sets = [feed_ids] + [[dom]] * rng.randint(0, 1)
    feeds = make_feeds(rng, sets, S, water_dominant=(dom == "water"))
    if dom != "water":
        # ethylene oxide in excess: rebalance the first feed by hand
        feeds[0]["composition"] = {S(c): v for c, v in rand_fracs(rng, feed_ids, "ethylene-oxide").items()}
        feeds[0].pop("basis", None)
    case = {"feed": feeds, "reaction": [{"stoichiometry": {S(c) if c in LIB else "diethylene_glycol": v
                                                            for c, v in nu.items()},
                                          "key": S(key), "conversion": round(rng.uniform(0.05, 0.9), 4)}],
            "heater": {}}
    if comps:
        case["components"] = comps
    m = model_section(rng, S, feed_ids)
    if m:
        case["model"] = m
    T_target = rng.uniform(300.0, 420.0)
    Q = duty_needed(case, T_target)
    if unknown == "temperature":
        case["heater"]["duty"] = with_unit(rng, Q, "heat_flow", p_plain=0.3)
    else:
        case["effluent"] = {"temperature": with_unit(rng, T_target, "temperature", p_plain=0.3)}
        case["solve"] = {"unknown": unknown}
        if unknown == "conversion":
            case["heater"]["duty"] = with_unit(rng, Q * rng.uniform(0.98, 1.02), "heat_flow", p_plain=0.3)
            del case["reaction"][0]["conversion"]
    return case


def gen_convrange(rng, unknown="conversion"):
    """conversion solves whose answer lies just outside [0, 1] (products present in the feed) or at
    the ends: the tool must report it (flag conversion_out_of_range) or refuse a negative flow."""
    S = id_styler(rng)
    r = rng.choice(sorted(REACTIONS))
    nu, key = REACTIONS[r]
    feed_ids = list(nu)
    feeds = make_feeds(rng, [feed_ids], S)
    case = {"feed": feeds, "reaction": [{"stoichiometry": {S(c): v for c, v in nu.items()}, "key": S(key),
                                          "conversion": rng.choice([-0.08, -0.02, 0.0, 1.0, 0.999])}],
            "heater": {}}
    m = model_section(rng, S, feed_ids)
    if m:
        case["model"] = m
    T_target = round(rng.uniform(310.0, 400.0), 3)
    Q = duty_needed(case, T_target)
    case["heater"]["duty"] = sig(Q, 12)
    case["effluent"] = {"temperature": T_target}
    case["solve"] = {"unknown": "conversion"}
    del case["reaction"][0]["conversion"]
    return case


def gen_supercritical(rng, unknown):
    """effluent or feeds at or above a component's Tc (Watson dHvap = 0 there), ideal-gas path."""
    S = id_styler(rng)
    ids = ["ethylene-oxide"] + rng.sample([c for c in ALL_IDS if c != "ethylene-oxide" and LIB[c]["tc"] > 540],
                                          rng.randint(1, 3))
    sets = [ids] + ([["ethylene-oxide"]] if rng.random() < 0.5 else [])
    feeds = make_feeds(rng, sets, S, temp_range=(300.0, 500.0), water_dominant=False)
    case = {"model": {"enthalpy": rng.choice(["ideal-gas-watson", "ideal-gas-watson", "auto"]),
                      "pressure": with_unit(rng, rng.uniform(3e6, 8e6), "pressure")},
            "feed": feeds, "heater": {}}
    T_target = rng.uniform(440.0, 530.0)
    Q = duty_needed(case, T_target)
    if unknown == "temperature":
        case["heater"]["duty"] = with_unit(rng, Q, "heat_flow", p_plain=0.3)
    else:
        case["effluent"] = {"temperature": with_unit(rng, T_target, "temperature", p_plain=0.3)}
        case["solve"] = {"unknown": "duty"}
    return case


def gen_options(rng, unknown):
    """optional [model] settings: bubble_margin, temperature_range (containing the root), feed normalize."""
    c = gen_reacting(rng, unknown)
    m = c.setdefault("model", {})
    m["pressure"] = with_unit(rng, rng.uniform(1e5, 6e5), "pressure")
    # a temperature *difference*: degC = K, degF = degR = 5/9 K (no offset)
    u = rng.choice(["K", "degC", "degF", "degR"])
    m["bubble_margin"] = f"{rng.uniform(2.0, 60.0):.6g} {u}"
    if unknown == "temperature":
        ours = model.calc(strip_meta(c))["effluent_temperature_k"]
        m["temperature_range"] = [with_unit(rng, ours - rng.uniform(20, 80), "temperature"),
                                  with_unit(rng, ours + rng.uniform(20, 200), "temperature")]
    f = c["feed"][0]
    f["composition"] = {k: v * rng.uniform(0.97, 1.03) for k, v in f["composition"].items()}
    f["normalize"] = True
    return c


# --------------------------------------------------------------------------------------------
# uncertainty cases: a random case of the kinds above, decorated with input standard uncertainties
# --------------------------------------------------------------------------------------------
FEED_NAMES = ["ester recycle", "process water", "Fresh Feed #2", "makeup", "R-204 inlet", "solvent"]


def rand_temp_u(rng):
    u = rng.uniform(0.1, 2.0)                       # K
    unit = rng.choice(["K", "K", "degC", "degF", "degR", None])
    if unit is None:
        return round(u, 4)
    return f"{sig(u / UNITS['temperature'][unit][0], 6):.6g} {unit}"


def rand_comp_u(rng, comp):
    """scalar or a per-component table (ids respelled at random: the table must match by id)."""
    if rng.random() < 0.45:
        return round(rng.uniform(0.0005, 0.01), 5)
    keys = list(comp)
    pick = rng.sample(keys, k=rng.randint(1, len(keys)))
    S = id_styler(rng)
    return {S(norm_id(k)): round(rng.uniform(0.0005, 0.01), 5) for k in pick}


def decorate_uncert(rng, case, unknown):
    """add standard uncertainties to every kind of input the case has (each with some probability)."""
    names = rng.sample(FEED_NAMES, k=len(case["feed"]))
    solved = None
    if unknown == "conversion":
        solved = [i for i, r in enumerate(case.get("reaction", [])) if "conversion" not in r][0]
    for f, nm in zip(case["feed"], names):
        if rng.random() < 0.3:
            f["name"] = nm
        F, q = model.conv(f["flow"], "molar_flow", "mass_flow")
        if rng.random() < 0.75:
            kind = rng.choice(["rel", "rel", "abs", "plain"])
            if kind == "rel":
                f["flow_uncertainty"] = rng.choice(["{:.3g} %", "{:.3g}%"]).format(rng.uniform(0.2, 5.0))
            elif kind == "abs":
                f["flow_uncertainty"] = with_unit(rng, F * rng.uniform(0.002, 0.05), q, p_plain=0.0)
            else:
                f["flow_uncertainty"] = sig(F * rng.uniform(0.002, 0.05), 6)
        if rng.random() < 0.65:
            f["temperature_uncertainty"] = rand_temp_u(rng)
        if rng.random() < 0.6:
            comp = f["composition"]
            if rng.random() < 0.15 and len(comp) < 6:
                # a component at fraction 0 that has an uncertainty of its own (table entry)
                extra = rng.choice([c for c in ("methanol", "ethanol", "acetone", "acetic-acid")
                                    if c not in {norm_id(k) for k in comp}])
                S = id_styler(rng)
                comp[S(extra)] = 0.0
                f["composition_uncertainty"] = {S(extra): round(rng.uniform(0.0005, 0.01), 5)}
                if rng.random() < 0.5:
                    k0 = rng.choice(list(comp))
                    f["composition_uncertainty"][k0] = round(rng.uniform(0.0005, 0.01), 5)
            else:
                f["composition_uncertainty"] = rand_comp_u(rng, comp)
    for i, r in enumerate(case.get("reaction", [])):
        if i != solved and rng.random() < 0.75:
            if rng.random() < 0.15:
                r["conversion_uncertainty"] = f"{rng.uniform(1, 10):.3g} %"
            else:
                r["conversion_uncertainty"] = round(rng.uniform(0.003, 0.05), 4)
    eff = case.get("effluent")
    if eff is not None:
        if "temperature" in eff and (unknown != "temperature" and rng.random() < 0.85
                                     or unknown == "temperature" and rng.random() < 0.5):
            eff["temperature_uncertainty"] = rand_temp_u(rng)
        if "composition" in eff and rng.random() < 0.75:
            cu = rand_comp_u(rng, eff["composition"])
            if isinstance(cu, dict):
                cu = {k: v / 4 for k, v in cu.items()}
            else:
                cu = cu / 4
            eff["composition_uncertainty"] = cu
    h = case.setdefault("heater", {})
    if "duty" in h and unknown != "duty" and rng.random() < 0.7:
        Q = model.conv(h["duty"], "heat_flow")[0]
        if rng.random() < 0.5:
            h["duty_uncertainty"] = f"{rng.uniform(0.3, 5.0):.3g} %"
        else:
            h["duty_uncertainty"] = with_unit(rng, abs(Q) * rng.uniform(0.005, 0.05) + 200.0, "heat_flow")
    if "heat_loss" in h and rng.random() < 0.6:
        QL = model.conv(h["heat_loss"], "heat_flow")[0]
        if rng.random() < 0.4 and QL > 0:
            h["heat_loss_uncertainty"] = f"{rng.uniform(5, 60):.3g} %"
        else:
            h["heat_loss_uncertainty"] = with_unit(rng, rng.uniform(200.0, 5000.0), "heat_flow")
    elif "heat_loss" not in h and rng.random() < 0.15:
        h["heat_loss_uncertainty"] = with_unit(rng, rng.uniform(200.0, 3000.0), "heat_flow")
    if not any(k.endswith("_uncertainty") for tbl in [*case["feed"], *case.get("reaction", []),
                                                      case.get("effluent", {}), h] for k in tbl):
        case["feed"][0]["temperature_uncertainty"] = rand_temp_u(rng)
    if not h:
        del case["heater"]
    return case


UNC_BASES = {"temperature": [("reacting", 10), ("measured", 4), ("mixture", 3), ("stoich", 2), ("inline", 1)],
             "duty": [("reacting", 8), ("measured", 5), ("mixture", 3), ("stoich", 2), ("inline", 1)],
             "conversion": [("reacting", 8), ("stoich", 3), ("inline", 1)]}


def gen_uncert(rng, unknown, gens):
    kinds = [k for k, w in UNC_BASES[unknown] for _ in range(w)]
    kind = rng.choice(kinds)
    c = gens[kind](rng, unknown)
    if unknown == "conversion" and not any("conversion" not in r for r in c.get("reaction", [])):
        raise CaseError("no conversion unknown")
    c["_base"] = kind
    return decorate_uncert(rng, c, unknown)


def edge_cases():
    """hand-made cases: liquid-path roots above Tc where an extrapolated DIPPR-100 Cp turns negative at
    higher T (H(T) not monotone on 200-1000 K)."""
    out = []
    for comp, kws in (({"2-propanol": 1.0}, [5, 20, 40, 60, 70, 74]),
                      ({"2-propanol": 0.5, "toluene": 0.5}, [60, 80]),
                      ({"ethylene_oxide": 0.9, "water": 0.1}, [20, 25, 28])):
        for kw in kws:
            out.append({"feed": [{"flow": "1 mol/s", "temperature": "300 K", "composition": comp}],
                        "heater": {"duty": f"{kw} kW"}, "category": "edge/non-monotone-cp_liq",
                        "name": "edge_" + "_".join(comp).replace("-", "") + f"_{kw}kW",
                        "comment": "liquid-cp path; T_out above Tc; extrapolated Cp_liq turns negative above ~650 K"})
    return out


def gen_units(rng):
    """one case per accepted unit string, that quantity written in that unit."""
    cases = []
    for q, units in UNITS.items():
        for u in sorted(units):
            S = id_styler(rng)
            c = gen_reacting(rng, "temperature", n_feeds=1)
            c.setdefault("model", {})
            if q == "temperature":
                c["feed"][0]["temperature"] = with_unit(rng, rng.uniform(285, 380), q, unit=u)
            elif q == "molar_flow":
                c["feed"][0]["flow"] = with_unit(rng, rng.uniform(0.5, 40), q, unit=u)
            elif q == "mass_flow":
                c["feed"][0]["flow"] = with_unit(rng, rng.uniform(0.01, 2.0), q, unit=u)
            elif q == "heat_flow":
                c.setdefault("heater", {})["heat_loss"] = with_unit(rng, rng.uniform(1e3, 2e4), q, unit=u)
            elif q == "pressure":
                c["model"]["pressure"] = with_unit(rng, rng.uniform(1e5, 2e6), q, unit=u)
            elif q == "molar_energy":
                c["components"] = {"water": {"hf_liq": with_unit(rng, -285800.0 + rng.uniform(-50, 50), q, unit=u),
                                             "hvap_tb": with_unit(rng, 40650.0 + rng.uniform(-50, 50), q, unit=u)}}
            elif q == "molar_mass":
                c["components"] = {"water": {"molar_mass": with_unit(rng, 18.01528, q, unit=u)}}
            # retarget the duty so the temperature stays sensible, written in a heat-flow unit
            T_target = rng.uniform(300, 410)
            Q = duty_needed(c, T_target)
            hu = u if q == "heat_flow" else None
            c["heater"]["duty"] = with_unit(rng, Q, "heat_flow", unit=hu, p_plain=0.0)
            c["category"] = "units"
            c["name"] = f"unit_{q}_{u.replace('/', '_per_').replace('°', 'deg_')}"
            c["comment"] = f"unit check: {q} in {u}"
            cases.append(c)
    return cases


# --------------------------------------------------------------------------------------------
# shared reference cases (tests/fixtures/reference) through the CLI
# --------------------------------------------------------------------------------------------

def reference_cases():
    cases = []
    for fn, path in (("balance_cases.json", "ideal-gas-watson"), ("liquid_path_cases.json", "liquid-cp")):
        d = json.load(open(os.path.join(REF_DIR, fn)))
        for c in d["cases"]:
            for form in ("reaction", "effluent"):
                feed, eff = c["feed_mol_s"], c["effluent_mol_s"]
                if form == "effluent" and feed == eff:
                    continue
                case = {"model": {"enthalpy": path}}
                if "watson_exponent" in c:
                    case["model"]["watson_n"] = c["watson_exponent"]
                if "P_Pa" in c:
                    case["model"]["pressure"] = float(c["P_Pa"])
                case["feed"] = [{"flow": float(c["feed_total_mol_s"]), "temperature": float(c["T_in_K"]),
                                 "composition": c["feed_mole_fractions"]}]
                if feed != eff:
                    if form == "reaction":
                        for r, (nu, key) in REACTIONS.items():
                            xi = feed.get(key, 0) - eff.get(key, 0)
                            if xi > 0 and all(abs(feed.get(k, 0) + v * xi - eff.get(k, 0)) < 1e-9
                                              for k, v in nu.items()):
                                case["reaction"] = [{"stoichiometry": nu, "key": key,
                                                     "conversion": xi / feed[key]}]
                        assert "reaction" in case, c["id"]
                    else:
                        case["effluent"] = {"composition": c["effluent_mole_fractions"], "normalize": True}
                case["heater"] = {"duty": float(c["Q_W"])}
                e = c["expected"]
                case["expect"] = {"effluent_temperature_k": e["T_out_K"],
                                  "feed_enthalpy_w": e["H_feed_total_W"],
                                  "effluent_enthalpy_w": e["H_effluent_total_W"]}
                if "T_bubble_effluent_K" in e:
                    case["expect"]["bubble_point_k"] = e["T_bubble_effluent_K"]
                case["category"] = "reference"
                case["name"] = f"ref_{c['id']}_{form}"
                case["comment"] = f"{fn} {c['id']} ({form} form): {c['description']}"
                cases.append(case)
        for b in d.get("bubble_points", []):
            x = b["x"]
            case = {"model": {"pressure": b["P_Pa"]},
                    "feed": [{"flow": 1.0, "temperature": 300.0, "composition": x, "normalize": True}],
                    "heater": {"duty": 0.0},
                    "expect": {"bubble_point_k": b["expected"]["T_bubble_K"]},
                    "category": "reference", "name": f"ref_{b['id']}_{int(b['P_Pa'])}",
                    "comment": f"{fn} bubble point {b['id']} {b['system']} at {b['P_Pa']} Pa"}
            cases.append(case)
    return cases


# --------------------------------------------------------------------------------------------
# invalid cases
# --------------------------------------------------------------------------------------------

def invalid_cases(rng):
    out = []

    def base():
        return {"model": {"pressure": "3 bar"},
                "feed": [{"flow": "40 kmol/h", "temperature": "45 degC",
                          "composition": {"water": 0.66, "methyl_acetate": 0.29, "methanol": 0.05}}],
                "reaction": [{"stoichiometry": {"methyl_acetate": -1, "water": -1, "acetic_acid": 1, "methanol": 1},
                              "key": "methyl_acetate", "conversion": 0.4}],
                "heater": {"duty": "30 kW"}}

    def add(name, case, keys):
        case["category"] = "invalid"
        case["name"] = name
        case["expect_error_keys"] = keys
        out.append(case)

    for u in ["kmol/hr", "kg/sec", "barg", "psig", "degK", "BTU/h", "kw", "C"]:
        c = base()
        where = rng.choice(["flow", "temperature", "duty", "pressure"])
        if where == "flow":
            c["feed"][0]["flow"] = f"12 {u}"; keys = ["feed", "flow"]
        elif where == "temperature":
            c["feed"][0]["temperature"] = f"300 {u}"; keys = ["feed", "temperature"]
        elif where == "duty":
            c["heater"]["duty"] = f"30 {u}"; keys = ["heater", "duty"]
        else:
            c["model"]["pressure"] = f"3 {u}"; keys = ["model", "pressure"]
        add(f"bad_unit_{where}_{u.replace('/', '_')}", c, keys)
    for bad in ["unobtainium", "methyl_acetat", "propanol"]:
        c = base()
        c["feed"][0]["composition"] = {"water": 0.66, bad: 0.29, "methanol": 0.05}
        add(f"unknown_component_feed_{bad}", c, ["feed", bad])
        c = base()
        c["reaction"][0]["stoichiometry"] = {"methyl_acetate": -1, "water": -1, bad: 1, "methanol": 1}
        add(f"unknown_component_reaction_{bad}", c, ["reaction", bad])
    for s in [0.9, 1.05, 0.95]:
        c = base()
        c["feed"][0]["composition"] = {"water": 0.66 * s, "methyl_acetate": 0.29, "methanol": 0.05}
        add(f"composition_sum_{s}", c, ["feed", "composition"])
    c = base()
    c["effluent"] = {"composition": {"water": 0.5, "methanol": 0.3}}
    del c["reaction"]
    add("effluent_composition_sum", c, ["effluent", "composition"])
    for X in [0.9, 0.99]:
        c = base()
        c["feed"][0]["composition"] = {"water": 0.2, "methyl_acetate": 0.75, "methanol": 0.05}
        c["reaction"][0]["conversion"] = X
        add(f"negative_flow_water_X{X}", c, ["reaction", "conversion"])
    c = base()
    c["feed"].append({"flow": "10 kmol/h", "temperature": 300.0, "composition": {"ethylene_oxide": 1.0}})
    c["reaction"].append({"stoichiometry": {"ethylene_oxide": -1, "water": -1, "ethylene_glycol": 1},
                          "key": "ethylene_oxide", "conversion": 0.95})
    c["feed"][0]["composition"] = {"water": 0.3, "methyl_acetate": 0.65, "methanol": 0.05}
    c["reaction"][0]["conversion"] = 0.5
    add("negative_flow_two_reactions", c, ["reaction", "conversion"])
    for tc in [340.0, 350.0]:
        c = base()
        c["components"] = {"foo": {"molar_mass": 60.0, "tb": 350.0, "tc": tc, "hvap_tb": 30000.0,
                                   "hf_ig": -2e5, "cp_ig": [40.0, 0.1, 0.0, 0.0, 0.0]}}
        c["feed"][0]["composition"] = {"water": 0.6, "methyl_acetate": 0.29, "methanol": 0.05, "foo": 0.06}
        add(f"inline_tc_le_tb_{tc}", c, ["components", "foo", "tc"])
    c = base()
    c["components"] = {"water": {"tc": 370.0}}
    add("override_tc_le_tb_water", c, ["components", "water", "tc"])
    for d in ["500 MW", "-500 MW"]:
        c = base()
        c["heater"]["duty"] = d
        add(f"no_root_{d.replace(' ', '')}", c, ["heater", "duty"])
    def simple(**kw):
        c = base()
        for k, v in kw.items():
            sec, key = k.split("__")
            if sec == "feed":
                c["feed"][0][key] = v
            elif sec == "reaction":
                c["reaction"][0][key] = v
            else:
                c.setdefault(sec, {})[key] = v
        return c
    add("key_is_product", simple(reaction__key="methanol"), ["reaction", "key"])
    add("key_not_in_reaction", simple(reaction__key="ethanol"), ["reaction", "key"])
    c = base(); c["feed"][0]["composition"] = {"water": 0.95, "methanol": 0.05}
    add("key_not_fed", c, ["reaction", "key"])
    c = base(); c["effluent"] = {"composition": {"water": 0.6, "methyl_acetate": 0.2, "acetic_acid": 0.1, "methanol": 0.1}}
    add("reactions_and_effluent_composition", c, ["effluent", "composition"])
    c = base(); c["heater"]["heat_los"] = "5 kW"
    add("unknown_field_typo", c, ["heater", "heat_los"])
    add("unknown_basis", simple(feed__basis="mas"), ["feed", "basis"])
    add("negative_feed_flow", simple(feed__flow="-12 kmol/h"), ["feed", "flow"])
    add("temperature_below_zero_K", simple(feed__temperature="-300 degC"), ["feed", "temperature"])
    c = base(); c["feed"][0]["composition"] = {"water": 0.76, "methyl_acetate": 0.29, "methanol": -0.05}
    add("negative_fraction", c, ["feed", "methanol"])
    c = base()
    c["components"] = {"foo": {"molar_mass": 60.0, "tb": 350.0, "tc": 520.0, "hvap_tb": 30000.0, "hf_ig": -2e5,
                               "cp_ig": [40.0, 0.1, 0.0, 0.0, 0.0], "psat": [20.0, -4000.0, 0.0, 0.0, 1.0]}}
    c["feed"][0]["composition"] = {"water": 0.6, "methyl_acetate": 0.29, "methanol": 0.05, "foo": 0.06}
    c["model"]["enthalpy"] = "liquid-cp"
    add("liquid_cp_forced_without_liquid_data", c, ["components", "foo"])
    c = base()
    c["components"] = {"foo": {"molar_mass": 60.0, "tb": 350.0, "tc": 520.0, "hvap_tb": 30000.0, "hf_ig": -2e5}}
    c["feed"][0]["composition"] = {"water": 0.6, "methyl_acetate": 0.29, "methanol": 0.05, "foo": 0.06}
    add("inline_without_cp", c, ["components", "foo"])
    c = base(); c["effluent"] = {"temperature": "60 degC"}; c["solve"] = {"unknown": "conversion"}
    add("conversion_solve_all_given", c, ["solve", "unknown"])
    c = base(); c["effluent"] = {"temperature": "60 degC"}; c["solve"] = {"unknown": "duty"}
    add("duty_solve_with_duty", c, ["heater", "duty"])
    c = base(); del c["heater"]; c["solve"] = {"unknown": "duty"}
    add("duty_solve_without_effluent_temperature", c, ["effluent", "temperature"])
    c = base(); del c["heater"]
    add("temperature_solve_without_duty", c, ["heater", "duty"])
    add("unknown_enthalpy_setting", simple(model__enthalpy="liquid"), ["model", "enthalpy"])
    c = base(); c["solve"] = {"unknown": "pressure"}
    add("unknown_solve_unknown", c, ["solve", "unknown"])
    add("conversion_above_one", simple(reaction__conversion=1.2), ["reaction", "conversion"])
    c = base()
    c["model"]["temperature_range"] = ["300 K", "305 K"]
    c["heater"]["duty"] = "2 MW"
    add("no_root_range", c, ["temperature_range"])
    return out


# --------------------------------------------------------------------------------------------
# running and comparing
# --------------------------------------------------------------------------------------------

def run_tool(exe, path):
    p = subprocess.run([exe, "calc", path, "--json"], capture_output=True, text=True, timeout=60)
    return p.returncode, p.stdout, p.stderr


def bad_numbers(text):
    """NaN / Infinity tokens anywhere, or JSON null where we expect numbers."""
    probs = []
    for tok in ("NaN", "nan", "Infinity", "inf"):
        import re
        if re.search(r"(?<![A-Za-z_])-?" + tok + r"(?![A-Za-z_])", text):
            probs.append(tok)
    return probs


def temperature_difference(v):
    if not isinstance(v, str):
        return float(v)
    num, unit = model.split_unit(v)
    return num * UNITS["temperature"][unit][0]


def expected_flags(case, ours):
    """flags we can predict exactly."""
    fl = set()
    tb = ours.get("bubble_point_k")
    if "pressure_pa" in ours:
        if tb is None:
            fl.add("no_bubble_point")
        else:
            margin = 10.0
            mdl = case.get("model", {})
            if "bubble_margin" in mdl:
                margin = temperature_difference(mdl["bubble_margin"])
            if ours["effluent_temperature_k"] >= tb:
                fl.add("two_phase_risk")
            elif tb - ours["effluent_temperature_k"] < margin:
                ours["_margin"] = margin
                fl.add("near_bubble_point")
    X = ours.get("conversion")
    if X is not None and not (0.0 <= X <= 1.0):
        fl.add("conversion_out_of_range")
    comps, paths = ours["_comps"], ours["enthalpy_path"]
    for T, ids in ours["_evals"]:
        for k in ids:
            c = comps[k]
            if T >= c.tc:
                fl.add("beyond_tc:" + k)
            raw = model.library().get(k, {})
            if paths[k] == "liquid-cp":
                rg = c.cp_liq_range
                if rg is not None and not (rg[0] <= T <= rg[1]):
                    fl.add("range_cp_liq:" + k)
            else:
                rg = raw.get("cp_ig_range") if k in model.library() else None
                rg = case.get("components", {}).get(k, {}).get("cp_ig_range", rg)
                if rg is not None and not (rg[0] <= T <= rg[1]):
                    fl.add("range_cp_ig:" + k)
    if tb is not None:
        for k, x in ours["effluent_composition"].items():
            if x > 0:
                rg = model.library().get(k, {}).get("psat_range")
                if "psat" in case.get("components", {}).get(k, {}):
                    rg = case["components"][k].get("psat_range")
                if rg is not None and not (rg[0] <= tb <= rg[1]):
                    fl.add("range_psat:" + k)
    return fl


class Stats:
    def __init__(self):
        self.maxdiff = defaultdict(float)
        self.where = {}
        self.n_cmp = defaultdict(int)
        self.notes = []

    def note(self, q, d, name):
        self.n_cmp[q] += 1
        if d > self.maxdiff[q] or q not in self.where:
            self.maxdiff[q] = max(d, self.maxdiff[q])
            self.where[q] = name


def rel(a, b, floor=1e-12):
    return abs(a - b) / max(abs(a), abs(b), floor)


def compare(case, ours, js, stats, name):
    """Returns a list of (quantity, ours, theirs, detail) disagreements."""
    bad = []

    def chk(q, a, b, kind, tol, floor=1e-12):
        if a is None or b is None:
            if (a is None) != (b is None):
                bad.append((q, a, b, "one side missing"))
            return
        d = abs(a - b) if kind == "abs" else rel(a, b, floor)
        stats.note(q, d, name)
        if not d <= tol:
            bad.append((q, a, b, f"{kind} diff {d:.3e} > {tol:g}"))

    chk("effluent_temperature_k", ours["effluent_temperature_k"], js.get("effluent_temperature_k"), "abs", TOL_T)
    chk("effluent_temperature_degc", ours["effluent_temperature_k"] - 273.15, js.get("effluent_temperature_degc"),
        "abs", TOL_T)
    chk("duty_w", ours["duty_w"], js.get("duty_w"), "rel", TOL_REL, floor=1.0)
    chk("heat_loss_w", ours["heat_loss_w"], js.get("heat_loss_w"), "rel", TOL_REL, floor=1e-9)
    chk("conversion", ours.get("conversion"), js.get("conversion"), "rel", TOL_REL, floor=1e-9)
    chk("effluent_flow_mol_s", ours["effluent_flow_mol_s"], js.get("effluent_flow_mol_s"), "rel", TOL_REL)
    chk("effluent_mass_flow_kg_s", ours["effluent_mass_flow_kg_s"], js.get("effluent_mass_flow_kg_s"), "rel", TOL_REL)
    if "pressure_pa" in ours or js.get("bubble_point_k") is not None:
        chk("pressure_pa", ours.get("pressure_pa"), js.get("pressure_pa"), "rel", 1e-12)
        chk("bubble_point_k", ours.get("bubble_point_k"), js.get("bubble_point_k"), "abs", TOL_T)
        chk("bubble_margin_k", ours.get("bubble_margin_k"), js.get("bubble_margin_k"), "abs", TOL_T)
    # composition
    jc = {norm_id(k): v for k, v in (js.get("effluent_composition") or {}).items()}
    for k in set(ours["effluent_composition"]) | set(jc):
        a = ours["effluent_composition"].get(k, 0.0)
        b = jc.get(k, 0.0)
        if b is None:
            bad.append((f"effluent_composition[{k}]", a, b, "null")); continue
        chk("effluent_composition", a, b, "abs", TOL_X)
        if abs(a - b) > TOL_X:
            bad[-1] = (f"effluent_composition[{k}]",) + bad[-1][1:]
    # path
    jp = {norm_id(k): v for k, v in (js.get("enthalpy_path") or {}).items()}
    stats.n_cmp["enthalpy_path"] += 1
    if jp != ours["enthalpy_path"]:
        bad.append(("enthalpy_path", ours["enthalpy_path"], jp, "path choice differs"))
    # extras: enthalpy flows, heat capacity, reactions, element balance
    scale = max(abs(ours["feed_enthalpy_w"]), 1.0)
    for q in ("feed_enthalpy_w", "effluent_enthalpy_w"):
        b = js.get(q)
        if b is None:
            bad.append((q, ours[q], b, "missing")); continue
        d = abs(ours[q] - b) / scale
        stats.note(q, d, name)
        if d > TOL_H_REL:
            bad.append((q, ours[q], b, f"diff/|H_feed| {d:.3e} > {TOL_H_REL:g}"))
    chk("effluent_heat_capacity_w_k", ours["effluent_heat_capacity_w_k"], js.get("effluent_heat_capacity_w_k"),
        "rel", TOL_REL)
    for i, r in enumerate(ours.get("reactions", [])):
        jrs = js.get("reactions") or []
        jr = jrs[i] if i < len(jrs) else {}
        chk("reaction.conversion", r["conversion"], jr.get("conversion"), "rel", TOL_REL, floor=1e-9)
        chk("reaction.extent_mol_s", r["extent_mol_s"], jr.get("extent_mol_s"), "rel", TOL_REL, floor=1e-9)
        chk("reaction.heat_of_reaction_298_j_mol", r["heat_of_reaction_298_j_mol"],
            jr.get("heat_of_reaction_298_j_mol"), "abs", 1e-6 * 1e3)
        chk("reaction.heat_of_reaction_outlet_j_mol", r["heat_of_reaction_outlet_j_mol"],
            jr.get("heat_of_reaction_outlet_j_mol"), "abs", 1e-3 + 0.0)
    if "element_balance" in ours and js.get("element_balance"):
        for el, (fi, fo) in ours["element_balance"].items():
            if fi == 0.0 and fo == 0.0 and el not in js["element_balance"]:
                continue     # efftemp leaves out elements with no flow (only from components at fraction 0)
            je = js["element_balance"].get(el, {})
            chk("element_balance.feed_mol_s", fi, je.get("feed_mol_s"), "rel", 1e-9)
            chk("element_balance.effluent_mol_s", fo, je.get("effluent_mol_s"), "rel", 1e-9)
    # flags we can predict
    exp = expected_flags(case, ours)
    got = {norm_flag(f) for f in (js.get("flags") or [])}
    got = {f for f in got if not f.startswith("element_imbalance")}
    stats.n_cmp["flags (set)"] += 1
    X = ours.get("conversion")
    for fl in sorted(exp ^ got):
        if fl == "conversion_out_of_range" and X is not None and min(abs(X), abs(X - 1)) < 1e-9:
            continue   # at the boundary within round-off
        tb = ours.get("bubble_point_k")
        if fl in ("two_phase_risk", "near_bubble_point") and tb is not None and min(
                abs(tb - ours["effluent_temperature_k"]), abs(tb - ours["effluent_temperature_k"] - ours.get("_margin", 10.0))) < 1e-6:
            continue
        bad.append(("flag " + fl, fl in exp, fl in got, "validity flag differs"))
    bad += compare_uncertainty(case, ours, js, stats, name)
    return bad


# uncertainty tolerances (brief)
TOL_U_REL = 1e-5       # sensitivity, contribution, standard_uncertainty: relative ...
TOL_U_ABS = 1e-9       # ... or absolute when tiny
TOL_SHARE = 1e-6       # share, absolute
TOL_U_INPUT = 1e-9     # value and standard uncertainty of each input (parsing), relative
TOL_U_IMMATERIAL = 1e-8   # see compare_uncertainty: near-cancelling sensitivities


def compare_uncertainty(case, ours, js, stats, name):
    bad = []
    try:
        ub = model.uncertainty(case, ours)
    except CaseError as e:
        return [("uncertainty", f"error: {e}", js.get("uncertainty"), "our model rejects the uncertainties")]
    ju = js.get("uncertainty")
    jt = js.get("temperature_uncertainty_k")
    stats.n_cmp["uncertainty present/absent"] += 1
    if ub is None or ju is None:
        if (ub is None) != (ju is None):
            bad.append(("uncertainty", ub and ub["standard_uncertainty"], ju and ju.get("standard_uncertainty"),
                        "budget on one side only"))
        if jt is not None:
            bad.append(("temperature_uncertainty_k", None, jt, "present without a budget"))
        return bad
    stats.n_cmp["uncertainty budgets"] += 1

    def near(a, b, tol_rel, tol_abs):
        return abs(a - b) <= tol_abs or abs(a - b) <= tol_rel * max(abs(a), abs(b))

    def chk(q, a, b, tol_rel, tol_abs):
        if not isinstance(b, (int, float)) or isinstance(b, bool):
            bad.append((q, a, b, "missing or not a number")); return
        d = abs(a - b)
        r = d / max(abs(a), abs(b)) if d > 0 else 0.0
        stats.note(q + " (abs)", d, name)
        if d > tol_abs:
            stats.note(q + " (rel, where abs > tol)", r, name)
        if not near(a, b, tol_rel, tol_abs):
            bad.append((q, a, b, f"rel diff {r:.3e} > {tol_rel:g} and abs diff {d:.3e} > {tol_abs:g}"))

    if ju.get("quantity") != ub["quantity"]:
        bad.append(("uncertainty.quantity", ub["quantity"], ju.get("quantity"), "differs"))
    chk("unc.standard_uncertainty", ub["standard_uncertainty"], ju.get("standard_uncertainty"), TOL_U_REL, 1e-12)
    if ub["quantity"] == "effluent_temperature_k":
        chk("temperature_uncertainty_k", ub["standard_uncertainty"], jt, TOL_U_REL, 1e-12)
    elif jt is not None:
        bad.append(("temperature_uncertainty_k", None, jt, "present in a duty/conversion solve"))
    jcs = {c.get("input"): c for c in ju.get("contributions") or []}
    ocs = {c["input"]: c for c in ub["contributions"]}
    if len(jcs) != len(ju.get("contributions") or []):
        bad.append(("uncertainty.contributions", "unique labels", [c.get("input") for c in ju["contributions"]],
                    "duplicate input labels"))
    for lab in sorted(set(ocs) - set(jcs)):
        bad.append((f"contribution '{lab}'", ocs[lab]["contribution"], None, "missing in efftemp"))
    for lab in sorted(set(jcs) - set(ocs)):
        bad.append((f"contribution '{lab}'", None, jcs[lab].get("contribution"), "not expected by our model"))
    for lab in sorted(set(ocs) & set(jcs)):
        o, j = ocs[lab], jcs[lab]
        stats.n_cmp["unc.contributions matched"] += 1
        n0 = len(bad)
        chk("unc.value", o["value"], j.get("value"), TOL_U_INPUT, 1e-12)
        chk("unc.input_standard_uncertainty", o["standard_uncertainty"], j.get("standard_uncertainty"),
            TOL_U_INPUT, 1e-15)
        for q in ("sensitivity", "contribution"):
            a_, b_ = o[q], j.get(q)
            if isinstance(b_, (int, float)) and not near(a_, b_, TOL_U_REL, TOL_U_ABS):
                # near-cancelling sensitivity: efftemp's finite difference has an absolute error set by
                # the size of the terms that cancel. Accepted (and listed) when the error it makes in the
                # contribution is below TOL_U_IMMATERIAL of the combined standard uncertainty.
                dc = abs(a_ - b_) * (o["standard_uncertainty"] if q == "sensitivity" else 1.0)
                if dc <= TOL_U_IMMATERIAL * ub["standard_uncertainty"]:
                    r = abs(a_ - b_) / max(abs(a_), abs(b_))
                    stats.note(f"unc.{q} (rel, accepted as immaterial)", r, name)
                    stats.notes.append((name, lab, q, a_, b_, f"rel {r:.2e}; error in the contribution "
                                        f"{dc:.2e} = {dc / ub['standard_uncertainty']:.1e} of u_c"))
                    continue
            chk("unc." + q, a_, b_, TOL_U_REL, TOL_U_ABS)
        chk("unc.share", o["share"], j.get("share"), 0.0, TOL_SHARE)
        for k in range(n0, len(bad)):
            bad[k] = (f"{bad[k][0]} ['{lab}']",) + bad[k][1:]
    # dominant input: exact, unless our two largest contributions tie (to 1e-6 relative)
    stats.n_cmp["unc.dominant_input"] += 1
    if ju.get("dominant_input") != ub["dominant_input"]:
        cs = sorted(ub["contributions"], key=lambda c: -c["contribution"])
        tie = (len(cs) > 1 and cs[0]["contribution"] > 0
               and cs[1]["contribution"] >= cs[0]["contribution"] * (1 - 1e-6)
               and ju.get("dominant_input") in {c["input"] for c in cs
                                                if c["contribution"] >= cs[0]["contribution"] * (1 - 1e-6)})
        if tie:
            stats.n_cmp["unc.dominant_input ties"] += 1
        else:
            bad.append(("uncertainty.dominant_input", ub["dominant_input"], ju.get("dominant_input"), "differs"))
    if FD_CHECK["on"]:
        bad += fd_check(case, ours, ub, stats, name)
    return bad


# --- internal check of OUR analytic sensitivities: central differences (Richardson-extrapolated) of
# our full model re-solved with the input perturbed in the case file itself. The composition rule is
# coded here a second time (not through model._direction).
FD_CHECK = {"on": True}
TOL_FD = 1e-6


def _perturbed(base, where, x0, delta):
    c = copy.deepcopy(base)
    v = x0 + delta
    if where[0] == "feed":
        f = c["feed"][where[1]]
        if where[2] == "flow":
            q = model.conv(f["flow"], "molar_flow", "mass_flow")[1]
            f["flow"] = f"{v!r} {'mol/s' if q == 'molar_flow' else 'kg/s'}"
        elif where[2] == "temperature":
            f["temperature"] = v
        else:
            f["composition"] = _perturb_fracs(f["composition"], where[3], delta)
            f["normalize"] = True
    elif where[0] == "reaction":
        c["reaction"][where[1]]["conversion"] = v
    elif where == ("effluent", "temperature"):
        c["effluent"]["temperature"] = v
    elif where[0] == "effluent":
        c["effluent"]["composition"] = _perturb_fracs(c["effluent"]["composition"], where[2], delta)
        c["effluent"]["normalize"] = True
    elif where == ("heater", "duty"):
        c["heater"]["duty"] = v
    elif where == ("heater", "heat_loss"):
        c["heater"]["heat_loss"] = v
    else:
        raise AssertionError(where)
    return c


def _perturb_fracs(comp, k, delta):
    s = sum(float(v) for v in comp.values())
    w = {key: float(v) / s for key, v in comp.items()}
    kk = [key for key in w if norm_id(key) == k][0]
    rest = 1.0 - w[kk]
    out = {}
    for key, v in w.items():
        if key == kk:
            out[key] = v + delta
        else:
            out[key] = v * (rest - delta) / rest if rest > 0 else v
    return out


def fd_check(case, ours, ub, stats, name):
    ykey = ub["quantity"]
    bad = []
    for cc in ub["contributions"]:
        where, x0 = cc["_where"], cc["value"]
        is_frac = "fraction" in where
        if "flow" in where:
            scale = 0.0
        elif "temperature" in where:
            scale = 100.0
        elif where[0] == "heater":
            scale = 1e3
        else:                       # fractions, conversions
            scale = 1.0
        h = 1e-4 * max(abs(x0), scale)
        if is_frac and 0.0 < x0 < 1.0:
            h = min(h, 0.01 * x0, 0.01 * (1.0 - x0))
        base = copy.deepcopy(case)
        if ykey == "effluent_temperature_k":
            # a narrow search range around the root (the 1 K scan from 200 K is the slow part)
            T, w = ours["effluent_temperature_k"], 3.0 + 3.0 * abs(cc["sensitivity"]) * h
            base.setdefault("model", {})["temperature_range"] = [T - w, T + w]

        def y(d):
            return model.calc(_perturbed(base, where, x0, d))[ykey]
        d = None
        for _ in range(3):
            try:
                d = _fd(y, x0, h, is_frac)
                break
            except CaseError as e:      # e.g. a negative effluent flow: a smaller step
                err, h = e, h / 10
        if d is None:
            bad.append((f"internal-fd ['{cc['input']}']", cc["sensitivity"], str(err), "our finite difference failed"))
            continue
        a = cc["sensitivity"]
        diff = abs(a - d)
        r = diff / max(abs(a), abs(d)) if diff > 0 else 0.0
        immaterial = diff * cc["standard_uncertainty"] <= 1e-10 * ub["standard_uncertainty"]
        stats.note("internal: analytic vs finite-difference sensitivity (rel)", r if diff > 1e-12 and not immaterial
                   else 0.0, name)
        if not (diff <= 1e-12 or r <= TOL_FD or immaterial):
            bad.append((f"internal-fd ['{cc['input']}']", a, d, f"our analytic vs our finite difference: rel {r:.3e}"))
    return bad


def _fd(y, x0, h, is_frac):
    """Richardson-extrapolated central difference; one-sided (second order, then extrapolated) for a
    fraction at 0 or next to 1."""
    if is_frac and x0 - h <= 0.0:
        y0 = y(0.0)
        fwd = lambda hh: (-3 * y0 + 4 * y(hh) - y(2 * hh)) / (2 * hh)
        return (4 * fwd(h / 2) - fwd(h)) / 3
    if is_frac and x0 + h >= 1.0 and x0 < 1.0:
        y0 = y(0.0)
        bwd = lambda hh: (3 * y0 - 4 * y(-hh) + y(-2 * hh)) / (2 * hh)
        return (4 * bwd(h / 2) - bwd(h)) / 3
    d1 = (y(h) - y(-h)) / (2 * h)
    d2 = (y(h / 2) - y(-h / 2)) / h
    return (4 * d2 - d1) / 3


def norm_flag(f):
    if ":" in f:
        a, b = f.split(":", 1)
        return a + ":" + (norm_id(b) if a != "element_imbalance" else b)
    return f


def check_reference_expect(case, js, stats, name):
    bad = []
    for q, v in case.get("expect", {}).items():
        b = js.get(q)
        if b is None:
            bad.append((f"reference {q}", v, b, "missing")); continue
        if q.endswith("_k"):
            d = abs(v - b); tol = 1e-6
        else:
            d = abs(v - b) / max(abs(v), 1.0); tol = 1e-9
        stats.note("reference:" + q, d, name)
        if d > tol:
            bad.append((f"reference {q}", v, b, f"diff {d:.3e} > {tol:g}"))
    return bad


def evaluate(runs):
    stats = Stats()
    cat_fail = defaultdict(int)
    disagreements = []
    for c, text, parsed, rc, out, err, human in runs:
        name = c["name"]
        try:
            ours = model.calc(copy.deepcopy(parsed))
        except CaseError as e:
            ours = e
        probs = []
        if isinstance(ours, CaseError):
            if rc != 2:
                probs.append(("exit", f"error: {ours}", rc, "we reject, efftemp accepts"))
        elif rc != 0:
            probs.append(("exit", 0, rc, err.strip()[:400]))
        else:
            nb = bad_numbers(out) + bad_numbers(human)
            if nb:
                probs.append(("output", "finite numbers", nb, "non-finite number in output"))
            js = json.loads(out)
            stats.n_cmp["solver=" + str(js.get("solver"))] += 1
            for k, v in js.items():
                if v is None:
                    stats.n_cmp["null-valued key: " + k] += 1
            probs += compare(parsed, ours, js, stats, name)
            if "expect" in c:
                probs += check_reference_expect(c, js, stats, name)
        if probs:
            cat_fail[c["category"]] += 1
            disagreements.append((name, c["category"], text, probs))
    return stats, disagreements, cat_fail


# mutations of OUR model: each must be caught by the comparison (shows the checks have teeth)
def _patch_unit(q, u, f):
    old = UNITS[q][u]
    UNITS[q][u] = (f, old[1])
    return lambda: UNITS[q].__setitem__(u, old)


def _patch_attr(obj, name, val):
    old = getattr(obj, name)
    setattr(obj, name, val)
    return lambda: setattr(obj, name, old)


def _mut_watson_above_tc():
    def w(self, T, n):
        return self.hvap_tb * (abs(self.tc - T) / (self.tc - self.tb)) ** n
    return _patch_attr(model.Comp, "watson", w)


def _mut_mass_basis():
    orig = model.fractions
    def fr(tbl, basis, comps, normalize, where):
        return orig(tbl, "mole", comps, normalize, where)
    return _patch_attr(model, "fractions", fr)


def _mut_auto_path():
    orig = model.Comp.h
    def h(self, T, path, n):
        return orig(self, T, "ideal-gas-watson" if path == "liquid-cp" else path, n)
    return _patch_attr(model.Comp, "h", h)


def _mut_tref():
    return _patch_attr(model, "T0", 298.0)


def _mut_heat_loss_sign():
    orig = model.conv
    def cv(v, *q):
        r = orig(v, *q)
        return r
    # flip heat loss by patching calc input
    orig_calc = model.calc
    def calc(case):
        c = copy.deepcopy(case)
        if "heat_loss" in c.get("heater", {}):
            hl = orig(c["heater"]["heat_loss"], "heat_flow")[0]
            c["heater"]["heat_loss"] = -hl
        r = orig_calc(c)
        r["heat_loss_w"] = -r["heat_loss_w"]
        return r
    return _patch_attr(model, "calc", calc)


def _mut_default_n():
    return _patch_attr(model, "DEFAULT_WATSON_N", 0.375)


def _mut_psat_log10():
    orig = model.Comp.psat_at
    def ps(self, T):
        return orig(self, T) * 1.001
    return _patch_attr(model.Comp, "psat_at", ps)


def _mut_unc(key):
    def mk():
        old = model.UNC_OPTS[key]
        model.UNC_OPTS[key] = not old
        return lambda: model.UNC_OPTS.__setitem__(key, old)
    return mk


MUTATIONS = {
    "Btu thermochemical (1054.350 J)": lambda: _patch_unit("heat_flow", "Btu/h", 1054.350 / 3600),
    "MMBtu/h as 1e6 Btu_th/h": lambda: _patch_unit("heat_flow", "MMBtu/h", 1054.350e6 / 3600),
    "kcal thermochemical (4.184 J)": lambda: _patch_unit("heat_flow", "kcal/h", 4184.0 / 3600),
    "Gcal/h thermochemical": lambda: _patch_unit("heat_flow", "Gcal/h", 4.184e9 / 3600),
    "lb = 0.4536 kg (lb/h)": lambda: _patch_unit("mass_flow", "lb/h", 0.4536 / 3600),
    "psi = 6895 Pa": lambda: _patch_unit("pressure", "psi", 6895.0),
    "atm = 101300 Pa": lambda: _patch_unit("pressure", "atm", 101300.0),
    "t/h = 1000/3600 * 1.0001": lambda: _patch_unit("mass_flow", "t/h", 1000.0 / 3600 * 1.0001),
    "kmol/h as kmol/min": lambda: _patch_unit("molar_flow", "kmol/h", 1000.0 / 60),
    "degF offset 459.6": lambda: _patch_attr_dict(UNITS["temperature"], "degF", (5.0 / 9.0, 459.6 * 5.0 / 9.0)),
    "kJ/mol as J/mol": lambda: _patch_unit("molar_energy", "kJ/mol", 1.0),
    "kg/mol as g/mol": lambda: _patch_unit("molar_mass", "kg/mol", 1.0),
    "Watson not zero above Tc": _mut_watson_above_tc,
    "default Watson n 0.375": _mut_default_n,
    "mass basis read as mole": _mut_mass_basis,
    "liquid path replaced by ideal-gas path": _mut_auto_path,
    "reference temperature 298.0 K": _mut_tref,
    "heat loss sign flipped": _mut_heat_loss_sign,
    "psat 0.1 % high": _mut_psat_log10,
    # uncertainty conventions
    "u: fraction perturbed without rescaling the others": _mut_unc("rescale_others"),
    "u: relative flow u of a mass flow taken in mol/s": _mut_unc("relative_flow_in_mol_s"),
    "u: scalar composition u also on fractions 0 and 1": _mut_unc("scalar_comp_on_all"),
    "u: mass-flow sensitivity per mol/s (not per kg/s)": _mut_unc("mass_flow_sensitivity_per_mol"),
}


def _patch_attr_dict(d, k, v):
    old = d[k]
    d[k] = v
    return lambda: d.__setitem__(k, old)


def self_test(runs, out):
    """Apply each mutation to our model and count the cases whose comparison now fails."""
    res = {}
    fd, FD_CHECK["on"] = FD_CHECK["on"], False     # only the comparison with efftemp counts here
    for name, mk in MUTATIONS.items():
        undo = mk()
        try:
            _, dis, _ = evaluate(runs)
        finally:
            undo()
        res[name] = len(dis)
    FD_CHECK["on"] = fd
    return res


PROBES = [
    ("probe_duplicate_id_case", '[[feed]]\nflow = 12.0\ntemperature = 330.0\n'
     'composition = { water = 0.5, Water = 0.5 }\n[heater]\nduty = 25000.0\n'),
    ("probe_duplicate_id_underscore", '[[feed]]\nflow = 12.0\ntemperature = 330.0\n'
     'composition = { methyl_acetate = 0.2, methyl-acetate = 0.2, water = 0.6 }\n[heater]\nduty = 25000.0\n'),
    ("probe_negative_bubble_margin", '[model]\npressure = "1 bar"\nbubble_margin = "-5 K"\n[[feed]]\n'
     'flow = 12.0\ntemperature = 370.0\ncomposition = { water = 1.0 }\n[heater]\nduty = 1.0\n'),
    ("probe_negative_conversion_given", '[[feed]]\nflow = 12.0\ntemperature = 330.0\n'
     'composition = { water = 0.6, methyl_acetate = 0.2, acetic_acid = 0.1, methanol = 0.1 }\n[[reaction]]\n'
     'stoichiometry = { methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }\n'
     'key = "methyl_acetate"\nconversion = -0.2\n[heater]\nduty = 25000.0\n'),
]


_HYD = ('[[feed]]\nflow = "38.5 kmol/h"\ntemperature = "46.5 degC"\n'
        'composition = { water = 0.64, methyl_acetate = 0.31, methanol = 0.05 }\n')
_RX = ('[[reaction]]\nstoichiometry = { methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }\n'
       'key = "methyl_acetate"\n')
UNC_PROBES = [
    ("probe_unc_solved_reaction_conversion_u",
     _HYD + '[[feed]]\nflow = "2.6 t/h"\ntemperature = "28 degC"\ncomposition = { water = 1.0 }\n'
     + _RX + 'conversion_uncertainty = 0.02\n[effluent]\ntemperature = "63.4 degC"\n'
     'temperature_uncertainty = "0.4 K"\n[heater]\nduty = "0.142 MW"\nduty_uncertainty = "2 %"\n'
     '[solve]\nunknown = "conversion"\n'),
    ("probe_unc_duty_u_in_duty_solve",
     _HYD + _RX + 'conversion = 0.4\n[effluent]\ntemperature = "63.4 degC"\n[heater]\n'
     'duty_uncertainty = "1 kW"\n[solve]\nunknown = "duty"\n'),
    ("probe_unc_all_zero", _HYD + 'temperature_uncertainty = "0 K"\nflow_uncertainty = "0 %"\n'
     '[heater]\nduty = "0.142 MW"\n'),
    ("probe_unc_molar_u_on_mass_flow", '[[feed]]\nflow = "2.6 t/h"\ntemperature = "28 degC"\n'
     'composition = { water = 1.0 }\nflow_uncertainty = "1 kmol/h"\n[heater]\nduty = "0.145 MW"\n'),
    ("probe_unc_table_entry_not_in_composition", _HYD + 'composition_uncertainty = { acetone = 0.01 }\n'
     '[heater]\nduty = "0.142 MW"\n'),
    ("probe_unc_same_feed_names", _HYD.replace("[[feed]]", '[[feed]]\nname = "recycle"')
     + 'temperature_uncertainty = "0.5 K"\n'
     + _HYD.replace("[[feed]]", '[[feed]]\nname = "recycle"') + 'temperature_uncertainty = "0.7 K"\n'
     '[heater]\nduty = "0.2 MW"\n'),
    ("probe_unc_normalized_percent_composition", '[[feed]]\nflow = "38.5 kmol/h"\ntemperature = "46.5 degC"\n'
     'composition = { water = 64, methyl_acetate = 31, methanol = 5 }\nnormalize = true\n'
     'composition_uncertainty = 0.004\n[heater]\nduty = "0.142 MW"\n'),
]


def describe_budget(rc, out, err):
    if rc != 0:
        return f"rc={rc}: " + (err.strip().splitlines() or [""])[0][:220]
    js = json.loads(out)
    u = js.get("uncertainty")
    if u is None:
        return "accepted, uncertainty = null"
    parts = [f"{c['input']}: value={c['value']:.6g} u={c['standard_uncertainty']:.4g} "
             f"sensitivity={c['sensitivity']:.6g} share={c['share']:.4g}" for c in u["contributions"]]
    return (f"accepted: {u['quantity']} u={u['standard_uncertainty']:.6g}, dominant_input="
            f"{json.dumps(u['dominant_input'])}; " + "; ".join(parts))


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--efftemp", required=True)
    ap.add_argument("--out", default=os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "target", "xcheck"))
    ap.add_argument("--seed", type=int, default=20240611)
    ap.add_argument("--n", type=int, default=360, help="number of random cases (plus unit, reference, invalid)")
    ap.add_argument("--n-unc", type=int, default=180,
                    help="number of random cases with input uncertainties (a third per unknown)")
    ap.add_argument("--no-fd-check", action="store_true",
                    help="skip the internal finite-difference check of our own analytic sensitivities")
    ap.add_argument("--self-test", action="store_true",
                    help="also mutate our model in known ways and show that each mutation is detected")
    args = ap.parse_args()
    rng = random.Random(args.seed)
    FD_CHECK["on"] = not args.no_fd_check
    os.makedirs(os.path.join(args.out, "cases"), exist_ok=True)

    # ---- build the case list
    cases = []
    plan = ([("reacting", "temperature")] * 30 + [("reacting", "duty")] * 12 + [("reacting", "conversion")] * 14
            + [("measured", "temperature")] * 8 + [("measured", "duty")] * 5
            + [("mixture", "temperature")] * 10 + [("mixture", "duty")] * 4
            + [("inline", "temperature")] * 6 + [("inline", "duty")] * 2 + [("inline", "conversion")] * 2
            + [("stoich", "temperature")] * 3 + [("stoich", "duty")] * 1 + [("stoich", "conversion")] * 2
            + [("convrange", "conversion")] * 2 + [("supercritical", "temperature")] * 2
            + [("supercritical", "duty")] * 1 + [("options", "temperature")] * 2 + [("options", "conversion")] * 1)
    gens = {"reacting": gen_reacting, "measured": gen_measured, "mixture": gen_mixture, "inline": gen_inline,
            "stoich": gen_stoich, "convrange": gen_convrange, "supercritical": gen_supercritical,
            "options": gen_options}
    rejected = defaultdict(int)
    i = 0
    tries = 0
    while len(cases) < args.n:
        kind, unknown = plan[i % len(plan)]
        tries += 1
        try:
            c = gens[kind](rng, unknown)
            if kind == "inline" and unknown == "conversion" and not c.get("reaction"):
                continue
            model.calc(strip_meta(c))       # our model must accept it (else regenerate)
        except (CaseError, ValueError, ZeroDivisionError, OverflowError, KeyError, IndexError) as e:
            rejected[f"{kind}: {str(e).split(' of ')[0][:40]}"] += 1
            continue
        i += 1
        c["category"] = f"{kind}/{unknown}"
        c["name"] = f"case{len(cases):04d}"
        cases.append(c)
    # uncertainty cases, with their own random stream so that the cases above stay as they were
    urng = random.Random(args.seed + 1)
    unknowns = ["temperature", "duty", "conversion"]
    n_unc = 0
    while n_unc < args.n_unc:
        unknown = unknowns[n_unc % 3]
        try:
            c = gen_uncert(urng, unknown, gens)
            model.uncertainty(strip_meta(c), model.calc(strip_meta(c)))
        except (CaseError, ValueError, ZeroDivisionError, OverflowError, KeyError, IndexError) as e:
            rejected[f"uncert/{unknown}: {str(e).split(' of ')[0][:40]}"] += 1
            continue
        c["category"] = f"uncert/{unknown}"
        c["name"] = f"unc{n_unc:04d}_{c.pop('_base')}"
        cases.append(c)
        n_unc += 1
    cases += gen_units(rng)
    cases += reference_cases()
    cases += edge_cases()
    inval = invalid_cases(rng)

    per_cat = defaultdict(int)
    features = defaultdict(int)
    runs = []
    for c in cases:
        name = c["name"]
        text = to_toml({k: v for k, v in c.items() if k not in ("category", "name", "expect")})
        path = os.path.join(args.out, "cases", name + ".toml")
        with open(path, "w") as f:
            f.write(text)
        parsed = tomllib.loads(text)          # we compute from exactly what the tool reads
        per_cat[c["category"]] += 1
        feats(parsed, features)
        rc, out, err = run_tool(args.efftemp, path)
        # the human-readable output must not show non-finite numbers either
        p = subprocess.run([args.efftemp, "calc", path], capture_output=True, text=True, timeout=60)
        runs.append((c, text, parsed, rc, out, err, p.stdout + p.stderr))
    stats, disagreements, cat_fail = evaluate(runs)

    # ---- invalid cases
    inv_results = []
    for c in inval:
        name = c["name"]
        text = to_toml({k: v for k, v in c.items() if k not in ("category", "name", "expect_error_keys")})
        path = os.path.join(args.out, "cases", name + ".toml")
        with open(path, "w") as f:
            f.write(text)
        per_cat["invalid"] += 1
        rc, out, err = run_tool(args.efftemp, path)
        msg = (out + err)
        probs = []
        if rc != 2:
            probs.append(("exit code", 2, rc, msg.strip()[:300]))
        if os.path.basename(path) not in msg:
            probs.append(("message names file", os.path.basename(path), msg.strip()[:300], "file not named"))
        low = msg.lower()
        missing = [k for k in c["expect_error_keys"] if k.lower().replace("_", "-") not in low.replace("_", "-")]
        if missing:
            probs.append(("message names key", c["expect_error_keys"], msg.strip()[:300], f"missing {missing}"))
        nb = bad_numbers(msg) + (["null"] if "null" in msg else [])
        if nb:
            probs.append(("non-finite/null in message", "none", nb, msg.strip()[:300]))
        # our model must reject it too
        try:
            model.calc(tomllib.loads(text))
            ours_ok = True
        except Exception:
            ours_ok = False
        inv_results.append((name, rc, msg.strip().splitlines()[0][:240] if msg.strip() else "", ours_ok))
        if probs:
            cat_fail["invalid"] += 1
            disagreements.append((name, "invalid", text, probs))

    # ---- report
    lines = []
    lines.append(f"cases per category (total {sum(per_cat.values())}):")
    for k in sorted(per_cat):
        lines.append(f"  {k:28s} {per_cat[k]:4d}   with disagreement: {cat_fail.get(k, 0)}")
    lines.append("feature coverage (random + unit + reference cases):")
    for k in sorted(features):
        lines.append(f"  {k:40s} {features[k]}")
    lines.append("max differences observed (abs for *_k and compositions; relative otherwise):")
    for q in sorted(stats.maxdiff):
        lines.append(f"  {q:45s} {stats.maxdiff[q]:.3e}  (n={stats.n_cmp[q]}, at {stats.where[q]})")
    if stats.notes:
        lines.append(f"uncertainty entries outside 1e-5 rel / 1e-9 abs but accepted as immaterial finite-difference "
                     f"error of efftemp (error in the contribution <= {TOL_U_IMMATERIAL:g} of u_c): {len(stats.notes)}")
        for n_, lab, q, a_, b_, det in stats.notes[:20]:
            lines.append(f"  {n_} '{lab}' {q}: ours={a_!r} efftemp={b_!r} ({det})")
    lines.append(f"enthalpy_path comparisons: {stats.n_cmp['enthalpy_path']}; flag-set comparisons: "
                 f"{stats.n_cmp['flags (set)']}")
    lines.append("efftemp solver used / keys printed as null in successful outputs:")
    for k in sorted(stats.n_cmp):
        if k.startswith("solver=") or k.startswith("null-valued"):
            lines.append(f"  {k:45s} {stats.n_cmp[k]}")
    lines.append("invalid cases (name, exit code, first line of message, our model also rejects):")
    for n, rc, m, ok in inv_results:
        lines.append(f"  {n:34s} rc={rc} ours_rejects={not ok}  {m}")
    lines.append("generated candidates our model rejected (regenerated): " + json.dumps(rejected))
    lines.append("observations (behaviour the spec leaves open; recorded, not judged):")
    for name, text in PROBES:
        path = os.path.join(args.out, "cases", name + ".toml")
        with open(path, "w") as f:
            f.write(text)
        rc, out, err = run_tool(args.efftemp, path)
        if rc == 0:
            js = json.loads(out)
            what = (f"accepted: T_out={js['effluent_temperature_k']:.6f} K, composition="
                    f"{json.dumps(js['effluent_composition'])}, flags={js['flags']}, warnings={js['warnings']}")
        else:
            what = f"rc={rc}: " + err.strip().splitlines()[0][:200]
        lines.append(f"  {name}: {what}")
    for name, text in UNC_PROBES:
        path = os.path.join(args.out, "cases", name + ".toml")
        with open(path, "w") as f:
            f.write(text)
        lines.append(f"  {name}: {describe_budget(*run_tool(args.efftemp, path))}")
    if args.self_test:
        st = self_test(runs, args.out)
        lines.append("self-test: cases failing after each deliberate mutation of OUR model (0 = not detected):")
        for k, v in st.items():
            lines.append(f"  {k:45s} {v}")
    lines.append(f"disagreements: {len(disagreements)}")
    summary = "\n".join(lines)
    print(summary)
    with open(os.path.join(args.out, "disagreements.txt"), "w") as f:
        for name, cat, text, probs in disagreements:
            f.write(f"==== {name} [{cat}]\n{text}\n")
            for p in probs:
                f.write(f"  {p[0]}: ours={p[1]!r} efftemp={p[2]!r}  ({p[3]})\n")
            f.write("\n")
    for name, cat, text, probs in disagreements[:30]:
        print(f"---- {name} [{cat}]")
        for p in probs[:8]:
            print(f"  {p[0]}: ours={p[1]!r} efftemp={p[2]!r}  ({p[3]})")
    with open(os.path.join(args.out, "summary.json"), "w") as f:
        json.dump({"per_category": per_cat, "maxdiff": stats.maxdiff, "n_compared": stats.n_cmp,
                   "features": features, "disagreements": [(n, c, [list(map(str, p)) for p in ps])
                                                           for n, c, _, ps in disagreements]}, f, indent=1)
    return 1 if disagreements else 0


def feats(c, F):
    F[f"feeds={len(c['feed'])}"] += 1
    ids = set()
    for f in c["feed"]:
        ids |= {norm_id(k) for k in f["composition"]}
        F["basis=" + f.get("basis", "mole")] += 1
        fl = f["flow"]
        F["flow " + ("number" if not isinstance(fl, str) else model.split_unit(fl)[1])] += 1
    for r in c.get("reaction", []):
        ids |= {norm_id(k) for k in r["stoichiometry"]}
    F[f"components={len(ids)}"] += 1
    F[f"reactions={len(c.get('reaction', []))}"] += 1
    m = c.get("model", {})
    F["enthalpy=" + m.get("enthalpy", "(default auto)")] += 1
    if "component_enthalpy" in m:
        F["component_enthalpy override"] += 1
    if "watson_n" in m:
        F["model.watson_n"] += 1
    if "pressure" in m:
        F["pressure given"] += 1
    if "composition" in c.get("effluent", {}):
        F["measured effluent composition"] += 1
        F["effluent basis=" + c["effluent"].get("basis", "mole")] += 1
    if c.get("heater", {}).get("heat_loss"):
        F["heat_loss"] += 1
    if c.get("components"):
        F["inline [components] table"] += 1
        lib = model.library()
        if any(norm_id(k) not in lib for k in c["components"]):
            F["inline new component"] += 1
    F["solve=" + c.get("solve", {}).get("unknown", "temperature")] += 1
    # uncertainty inputs
    unc = False
    for f in c["feed"]:
        if "flow_uncertainty" in f:
            unc = True
            rel = model._relative(f["flow_uncertainty"]) is not None
            q = model.conv(f["flow"], "molar_flow", "mass_flow")[1]
            F["u: flow_uncertainty " + ("relative" if rel else "absolute") + " on a " + q.replace("_", " ")] += 1
        if "temperature_uncertainty" in f:
            unc = True
            F["u: feed temperature_uncertainty"] += 1
        if "composition_uncertainty" in f:
            unc = True
            cu = f["composition_uncertainty"]
            F["u: feed composition_uncertainty " + ("table" if isinstance(cu, dict) else "scalar")
              + f" ({f.get('basis', 'mole')} basis)"] += 1
            if isinstance(cu, dict) and any(float(v) == 0.0 for k, v in f["composition"].items()
                                            if norm_id(k) in {norm_id(x) for x in cu}):
                F["u: table entry for a fraction of 0"] += 1
    for r in c.get("reaction", []):
        if "conversion_uncertainty" in r:
            unc = True
            F["u: conversion_uncertainty " + ("relative" if isinstance(r["conversion_uncertainty"], str)
                                              else "absolute")] += 1
    e = c.get("effluent", {})
    if "temperature_uncertainty" in e:
        unc = True
        F["u: effluent temperature_uncertainty (solve=" + c.get("solve", {}).get("unknown", "temperature") + ")"] += 1
    if "composition_uncertainty" in e:
        unc = True
        F["u: effluent composition_uncertainty " + ("table" if isinstance(e["composition_uncertainty"], dict)
                                                     else "scalar") + f" ({e.get('basis', 'mole')} basis)"] += 1
    h = c.get("heater", {})
    for k in ("duty_uncertainty", "heat_loss_uncertainty"):
        if k in h:
            unc = True
            F[f"u: {k} " + ("relative" if model._relative(h[k]) is not None else "absolute")] += 1
    if unc:
        F["u: cases with uncertainties, feeds=%d" % len(c["feed"])] += 1
        F["u: cases with uncertainties, solve=" + c.get("solve", {}).get("unknown", "temperature")] += 1
        if any(f.get("basis") == "mass" for f in c["feed"]):
            F["u: cases with uncertainties and a mass-basis feed"] += 1
        if any(model.conv(f["flow"], "molar_flow", "mass_flow")[1] == "mass_flow" for f in c["feed"]):
            F["u: cases with uncertainties and a mass flow"] += 1
        if any(f.get("name") for f in c["feed"]):
            F["u: cases with uncertainties and a named feed"] += 1


if __name__ == "__main__":
    sys.exit(main())
