"""plants.py: draw a heated liquid-phase reactor from a family, simulate it minute by minute, and
write what its plant data system would export, with one injected fault and the truth beside it.

Written for the zoo (tools/zoo/README.md) from efftemp's documentation only (DESIGN.md, README.md:
site configuration and export layout). It shares no code with the Rust program or its simulator.
The steady balance mirrors tools/xcheck/model.py (heat-of-formation method, liquid path, element
basis at 298.15 K); that module is imported to cross-check the configured model at the design
point and for the Raoult bubble point that sets the drawn reactor pressure.

Everything random comes from numpy's PCG64 seeded by (zoo seed, plant number, run number), so the
same arguments give the same files.
"""
from __future__ import annotations

import datetime as dt
import json
import math
import os
import sys
import tomllib
from zoneinfo import ZoneInfo

import numpy as np
from scipy.signal import lfilter

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.abspath(os.path.join(HERE, "..", ".."))
sys.path.insert(0, os.path.join(ROOT, "tools", "xcheck"))
import model as xmodel  # noqa: E402  (independent Python balance of tools/xcheck)

T0 = 298.15
MIN = 60.0  # s

with open(os.path.join(ROOT, "config", "components.toml"), "rb") as _f:
    LIB = tomllib.load(_f)["components"]


# ----------------------------------------------------------------------------------------------
# Liquid-path enthalpy, vectorised (same formulas as tools/xcheck/model.py, liquid-cp path)
# ----------------------------------------------------------------------------------------------
class Comp:
    def __init__(self, cid: str):
        d = LIB[cid]
        self.id = cid
        self.hf = float(d["hf_liq"])
        self.c = np.array(d["cp_liq"], dtype=float)
        self.M = float(d["molar_mass"])  # g/mol
        self.k = np.arange(5)
        self.int0 = float(np.sum(self.c / (self.k + 1) * T0 ** (self.k + 1)))

    def dh(self, T):
        """∫_{T0}^{T} Cp_liq dτ (J/mol); T may be an array."""
        c = self.c
        return T * (c[0] + T * (c[1] / 2 + T * (c[2] / 3 + T * (c[3] / 4 + T * c[4] / 5)))) - self.int0

    def cp(self, T):
        c = self.c
        return c[0] + T * (c[1] + T * (c[2] + T * (c[3] + T * c[4])))


def tid(cid: str) -> str:
    """Component id as written in the site file (underscores, like the README example)."""
    return cid.replace("-", "_")


# ----------------------------------------------------------------------------------------------
# Families: chemistry and feed sets. Heats of reaction follow from components.toml's liquid
# formation enthalpies at 298.15 K (per mol of key): methyl acetate hydrolysis +8.2 kJ/mol,
# ethyl acetate hydrolysis +3.2, the two esterifications -8.2 and -3.2, ethylene oxide hydration
# -96.2 kJ/mol. Temperature windows keep every correlation inside its published range except
# ethylene oxide's liquid Cp (range ends at 283.85 K), which an engineer would accept.
# ----------------------------------------------------------------------------------------------
def _rest(d, comp):
    d[comp] = 1.0 - sum(v for k, v in d.items() if k != comp)
    return d


FAMILIES = {
    "mea-hydrolysis": {
        "desc": "methyl acetate hydrolysis reactor",
        "sign": "endothermic",
        "reaction": {"name": "methyl acetate hydrolysis", "key": "methyl-acetate",
                     "nu": {"methyl-acetate": -1, "water": -1, "acetic-acid": 1, "methanol": 1}},
        "X": (0.30, 0.55), "T_out": (330.0, 360.0), "rise": (20.0, 45.0),
        "feeds": {
            "ester recycle": lambda r: (_rest({"methyl-acetate": r.uniform(0.22, 0.38),
                                               "methanol": r.uniform(0.02, 0.07), "water": 0}, "water"),
                                        (30.0, 50.0)),
            "process water": lambda r: ({"water": 1.0}, (15.0, 35.0)),
            "wash water return": lambda r: (_rest({"methanol": r.uniform(0.04, 0.12), "water": 0}, "water"),
                                            (25.0, 45.0)),
        },
        "sets": [["ester recycle"], ["ester recycle", "process water"],
                 ["ester recycle", "process water", "wash water return"], ["ester recycle", "wash water return"]],
        "shares": {"ester recycle": (0.55, 0.85)},
        "products": ["acetic-acid"],
    },
    "eta-hydrolysis": {
        "desc": "ethyl acetate hydrolysis reactor",
        "sign": "endothermic",
        "reaction": {"name": "ethyl acetate hydrolysis", "key": "ethyl-acetate",
                     "nu": {"ethyl-acetate": -1, "water": -1, "acetic-acid": 1, "ethanol": 1}},
        "X": (0.20, 0.45), "T_out": (320.0, 338.0), "rise": (18.0, 35.0),
        "feeds": {
            "ester feed": lambda r: (_rest({"ethyl-acetate": r.uniform(0.12, 0.22),
                                            "ethanol": r.uniform(0.01, 0.04), "water": 0}, "water"), (25.0, 40.0)),
            "process water": lambda r: ({"water": 1.0}, (15.0, 30.0)),
            "acid recycle": lambda r: (_rest({"acetic-acid": r.uniform(0.03, 0.08), "ethanol": r.uniform(0.01, 0.03),
                                              "water": 0}, "water"), (25.0, 40.0)),
        },
        "sets": [["ester feed"], ["ester feed", "process water"], ["ester feed", "acid recycle"],
                 ["ester feed", "process water", "acid recycle"]],
        "shares": {"ester feed": (0.6, 0.85)},
        "products": [],
    },
    "mea-esterification": {
        "desc": "methyl acetate esterification reactor",
        "sign": "exothermic",
        "reaction": {"name": "acetic acid esterification with methanol", "key": "acetic-acid",
                     "nu": {"acetic-acid": -1, "methanol": -1, "methyl-acetate": 1, "water": 1}},
        "X": (0.35, 0.65), "T_out": (328.0, 356.0), "rise": (18.0, 40.0),
        "feeds": {
            "mixed feed": lambda r: (_rest({"acetic-acid": r.uniform(0.30, 0.40), "methanol": r.uniform(0.45, 0.55),
                                            "water": 0}, "water"), (25.0, 40.0)),
            "acid feed": lambda r: (_rest({"acetic-acid": r.uniform(0.80, 0.95), "water": 0}, "water"), (25.0, 45.0)),
            "methanol feed": lambda r: (_rest({"methanol": r.uniform(0.92, 0.99), "water": 0}, "water"), (15.0, 35.0)),
            "alcohol recycle": lambda r: (_rest({"methyl-acetate": r.uniform(0.08, 0.15), "water": r.uniform(0.1, 0.2),
                                                 "acetic-acid": r.uniform(0.02, 0.06), "methanol": 0}, "methanol"),
                                          (25.0, 45.0)),
        },
        "sets": [["mixed feed"], ["acid feed", "methanol feed"], ["acid feed", "methanol feed", "alcohol recycle"]],
        "shares": {"acid feed": (0.38, 0.48), "mixed feed": (1.0, 1.0)},
        "products": ["methyl-acetate"],
    },
    "eta-esterification": {
        "desc": "ethyl acetate esterification reactor",
        "sign": "exothermic",
        "reaction": {"name": "acetic acid esterification with ethanol", "key": "acetic-acid",
                     "nu": {"acetic-acid": -1, "ethanol": -1, "ethyl-acetate": 1, "water": 1}},
        "X": (0.30, 0.60), "T_out": (320.0, 338.0), "rise": (15.0, 35.0),
        "feeds": {
            "mixed feed": lambda r: (_rest({"acetic-acid": r.uniform(0.30, 0.40), "ethanol": r.uniform(0.40, 0.50),
                                            "water": 0}, "water"), (25.0, 40.0)),
            "acid feed": lambda r: (_rest({"acetic-acid": r.uniform(0.80, 0.95), "water": 0}, "water"), (25.0, 40.0)),
            "ethanol feed": lambda r: (_rest({"ethanol": r.uniform(0.86, 0.95), "water": 0}, "water"), (15.0, 35.0)),
            "alcohol recycle": lambda r: (_rest({"ethyl-acetate": r.uniform(0.05, 0.12), "water": r.uniform(0.15, 0.3),
                                                 "acetic-acid": r.uniform(0.02, 0.06), "ethanol": 0}, "ethanol"),
                                          (25.0, 40.0)),
        },
        "sets": [["mixed feed"], ["acid feed", "ethanol feed"], ["acid feed", "ethanol feed", "alcohol recycle"]],
        "shares": {"acid feed": (0.38, 0.48), "mixed feed": (1.0, 1.0)},
        "products": ["ethyl-acetate"],
    },
    "eo-hydration": {
        "desc": "ethylene oxide hydration reactor (glycol unit)",
        "sign": "exothermic",
        "reaction": {"name": "ethylene oxide hydration", "key": "ethylene-oxide",
                     "nu": {"ethylene-oxide": -1, "water": -1, "ethylene-glycol": 1}},
        "X": (0.82, 0.92), "T_out": (350.0, 400.0), "rise": (15.0, 35.0),
        "feeds": {
            "premixed feed": lambda r: (_rest({"ethylene-oxide": r.uniform(0.05, 0.08), "water": 0}, "water"),
                                        (15.0, 30.0)),
            "oxide feed": lambda r: (_rest({"ethylene-oxide": r.uniform(0.975, 0.998), "water": 0}, "water"), (5.0, 12.0)),
            "process water": lambda r: ({"water": 1.0}, (20.0, 40.0)),
            "glycol recycle": lambda r: (_rest({"ethylene-glycol": r.uniform(0.05, 0.15), "water": 0}, "water"),
                                         (40.0, 70.0)),
        },
        "sets": [["premixed feed"], ["oxide feed", "process water"], ["oxide feed", "process water", "glycol recycle"]],
        "shares": {"oxide feed": (0.05, 0.075), "premixed feed": (1.0, 1.0)},
        "products": ["ethylene-glycol"],
        "accepted": ["range_cp_liq:ethylene_oxide"],
    },
}

FAULT_KINDS = ["fouling", "conversion_up", "conversion_down", "effluent_ti_bias", "feed_ti_bias",
               "flow_stuck", "flow_drift", "analyzer_frozen", "heat_loss", "none"]
EXPECTED_CAUSE = {
    "fouling": ["heater_fouling"], "conversion_up": ["conversion_drift"], "conversion_down": ["conversion_drift"],
    "effluent_ti_bias": ["instrument_fault"], "feed_ti_bias": ["instrument_fault"], "flow_stuck": ["instrument_fault"],
    "flow_drift": ["instrument_fault"], "analyzer_frozen": ["instrument_fault", "data_quality"],
    "heat_loss": ["heat_loss"], "none": [],
}

SITE_A = ["Hollin", "Marl", "Cress", "Wend", "Thorn", "Sable", "Orrin", "Belstow", "Kestle", "Dunmere",
          "Aldgrave", "Pennick", "Rusholt", "Yarrow", "Callow", "Brindle", "Skelding", "Tarrant"]
SITE_B = ["gate", "bridge", "holme", "ford", "combe", "wick", "ley", "stead", "haven", "field"]
ZONES = ["Europe/London", "Europe/Berlin", "America/Chicago", "Asia/Singapore", "Australia/Perth",
         "America/Sao_Paulo", "UTC", "Europe/Madrid"]

UNIT_OUT = {  # (factor, offset): value_in_unit = (SI - offset) / factor
    "degC": (1.0, 273.15), "K": (1.0, 0.0), "degF": (5.0 / 9.0, 459.67 * 5.0 / 9.0),
    "kmol/h": (1000.0 / 3600, 0.0), "mol/s": (1.0, 0.0), "t/h": (1000.0 / 3600, 0.0), "kg/h": (1.0 / 3600, 0.0),
    "kW": (1e3, 0.0), "MW": (1e6, 0.0), "bar": (1e5, 0.0), "kPa": (1e3, 0.0), "%": (0.01, 0.0),
}


def to_unit(si, unit):
    f, o = UNIT_OUT[unit]
    return (si - o) / f


# ----------------------------------------------------------------------------------------------
# The plant draw
# ----------------------------------------------------------------------------------------------
def draw_plant(seed: int, index: int) -> dict:
    r = np.random.default_rng([seed, index, 0])
    fam_name = list(FAMILIES)[index % len(FAMILIES)]  # families in turn: every five plants cover all
    fam = FAMILIES[fam_name]
    site = f"{r.choice(SITE_A)}{r.choice(SITE_B)} works"
    area = int(r.integers(11, 89))
    unit_no = int(r.integers(1, 9))
    unit = f"R-{area}{unit_no}0"
    prefix = f"{''.join(w[0] for w in site.split()).lower()}{area}"
    fset = list(fam["sets"][int(r.integers(len(fam["sets"])))])

    feeds = []
    for j, name in enumerate(fset):
        comp, trange = fam["feeds"][name](r)
        comp = {k: v for k, v in comp.items() if v > 1e-9}
        feeds.append({"name": name, "comp": comp, "T": 273.15 + r.uniform(*trange)})
    # molar shares of the total feed
    first = fset[0]
    s0 = r.uniform(*fam["shares"].get(first, (0.55, 0.85))) if len(fset) > 1 else 1.0
    rest = np.array([r.uniform(0.5, 1.5) for _ in fset[1:]])
    if fam_name == "eo-hydration" and len(fset) > 1:
        pass  # the oxide share s0 is set from the water:oxide ratio window
    shares = [s0] + list((1 - s0) * rest / rest.sum()) if len(fset) > 1 else [1.0]
    # alcohol excess for the two-feed esterifications: acid share 0.38-0.48 leaves >= 1.08 alcohol:acid
    F_tot = r.uniform(25.0, 140.0) * 1000.0 / 3600  # mol/s
    for f, s in zip(feeds, shares):
        f["F"] = F_tot * s
    tags_used = []

    def tag(kind, loop, suffix=""):
        t = f"{kind}-{area}{loop}{suffix}"
        tags_used.append(t)
        return t

    # instruments: units, noise, analyzers
    for j, f in enumerate(feeds):
        n = j + 1
        f["flow_tag"] = tag("FI", f"{n}1")
        f["flow_unit"] = str(r.choice(["kmol/h", "kmol/h", "t/h", "kg/h", "mol/s"]))
        f["temp_tag"] = tag("TI", f"{n}2")
        multi = len(f["comp"]) > 1
        f["analyzer"] = bool(multi and r.random() < 0.55)
        f["basis"] = str(r.choice(["mole", "mole", "mass"])) if multi else "mole"
        f["flow_noise"] = r.uniform(0.002, 0.006)
        f["flow_bias"] = r.normal(0.0, 0.007)
        f["T_noise"] = r.uniform(0.03, 0.12)
        f["T_bias"] = r.normal(0.0, 0.2)
        if f["analyzer"]:
            f["an_tags"] = {c: tag("AI", f"{n}3", chr(ord("A") + i)) for i, c in enumerate(f["comp"])}
            f["an_cycle"] = int(r.integers(5, 16))
            f["an_noise"] = r.uniform(0.08, 0.25)  # % absolute
        # the composition the engineer configures when there is no analyzer: design sheet values
        f["comp_cfg"] = {k: v for k, v in f["comp"].items()}
        if multi and not f["analyzer"]:
            main = max((k for k in f["comp"] if k != "water"), key=lambda k: f["comp"][k], default=None)
            if main is not None:
                d = r.normal(0.0, 0.004)
                cfg = dict(f["comp"])
                cfg[main] = max(1e-4, cfg[main] + d)
                s = sum(cfg.values())
                f["comp_cfg"] = {k: round(v / s, 4) for k, v in cfg.items()}
                s = sum(f["comp_cfg"].values())
                big = max(f["comp_cfg"], key=f["comp_cfg"].get)
                f["comp_cfg"][big] = round(f["comp_cfg"][big] + 1.0 - s, 4)
    rx = fam["reaction"]
    all_ids = []
    for f in feeds:
        for c in f["comp"]:
            if c not in all_ids:
                all_ids.append(c)
    for c in rx["nu"]:
        if c not in all_ids:
            all_ids.append(c)
    X0 = r.uniform(*fam["X"])
    plant = {
        "seed": seed, "index": index, "family": fam_name, "description": fam["desc"], "sign": fam["sign"],
        "site": site, "unit": unit, "area": area, "prefix": prefix,
        "time_zone": str(r.choice(ZONES)), "shifts": [["06:00", "14:00", "22:00"], ["07:00", "19:00"]][int(r.random() < 0.35)],
        "feeds": feeds, "ids": all_ids, "reaction": rx, "X0": X0,
        "X_cfg": float(np.clip(X0 + r.normal(0.0, 0.012), 0.02, 0.98)),
        "res_sensitivity": r.uniform(0.0, 0.5), "tau_res": r.uniform(20.0, 60.0),
        "dead_time": int(r.integers(1, 11)), "lag": float(r.uniform(2.0, 20.0)),
        "cp_error": {c: float(r.normal(0.0, 0.01)) for c in all_ids},
        "T_amb_mean": r.uniform(0.0, 25.0), "T_amb_amp": r.uniform(3.0, 8.0),
        "duty_bias": r.normal(0.0, 0.015), "duty_noise": r.uniform(0.002, 0.005),
        "duty_unit": str(r.choice(["kW", "kW", "MW"])),
        "temp_unit": str(r.choice(["degC"] * 6 + ["K", "degF"])),
        "eff_T_noise": r.uniform(0.03, 0.10), "eff_T_ar": r.uniform(0.0, 0.8),
        "eff_T_q": float(r.choice([0.01, 0.01, 0.05])),
        "has_ambient": bool(r.random() < 0.7), "has_pressure_tag": bool(r.random() < 0.8),
        "effluent_analyzer": bool(r.random() < 0.4),
        "knows_dynamics": bool(r.random() < 0.6),
        "dyn_cfg_err": (r.uniform(0.8, 1.2), r.uniform(0.8, 1.25)),
        "heat_loss_cfg": str(r.choice(["value", "value", "value", "none"])), "heat_loss_cfg_err": r.uniform(0.6, 1.4),
        "operator": {"feed_steps_per_day": r.uniform(1.5, 4.0), "trim_threshold": r.uniform(0.5, 1.0),
                     "gain_err": r.uniform(0.8, 1.2), "delay": (2, 20)},
        "accepted_flags": fam.get("accepted", []),
    }
    plant["flow_tags"] = [f["flow_tag"] for f in feeds]
    plant["duty_tag"] = tag("JI", "40")
    plant["pressure_tag"] = tag("PI", "41") if plant["has_pressure_tag"] else None
    plant["eff_T_tag"] = tag("TI", "50")
    plant["ambient_tag"] = f"TI-0{int(r.integers(901, 999))}" if plant["has_ambient"] else None
    if plant["ambient_tag"]:
        tags_used.append(plant["ambient_tag"])
    sim = Balance(plant)
    # design point: operator's target temperature and the duty that reaches it
    Tf_mix = sum(f["F"] * f["T"] for f in feeds) / F_tot
    X = X0
    T_ad = sim.solve_T(np.array([0.0]), X=np.array([X]), UA=0.0, Tamb=0.0)[0]
    lo, hi = fam["T_out"]
    rise = r.uniform(*fam["rise"])
    T_target = float(np.clip(T_ad + rise, lo, hi)) if fam["sign"] == "exothermic" else float(np.clip(Tf_mix + rise, lo, hi))
    if T_target < T_ad + 5.0:
        T_target = T_ad + 5.0 + r.uniform(0, 5)
    plant["T_target"] = T_target
    plant["T_ad"] = float(T_ad)
    Cp_flow = sim.cp_flow(T_target, X)
    plant["Cp_flow"] = Cp_flow
    UA = r.uniform(0.005, 0.02) * Cp_flow * (T_target - Tf_mix) / max(T_target - (273.15 + plant["T_amb_mean"]), 10.0)
    plant["UA"] = float(UA)
    Tamb_K = 273.15 + plant["T_amb_mean"]
    Q_true = sim.duty_for(T_target, X, UA, Tamb_K)
    plant["Q0"] = float(Q_true)
    plant["heat_loss_true_w"] = float(UA * (T_target - Tamb_K))
    plant["heat_loss_cfg_w"] = float(plant["heat_loss_true_w"] * plant["heat_loss_cfg_err"])
    # pressure: Raoult bubble point of the design effluent (tools/xcheck/model.py) >= T_target + 40 K
    n_out = sim.n_out_design(X)
    xo = {c: float(v / n_out.sum()) for c, v in zip(sim.ids, n_out) if v > 0}
    comps = {c: xmodel.build_comp(c, None) for c in xo}
    P = 2.0e5
    for _ in range(40):
        tb = xmodel.bubble_point(comps, xo, P)
        if tb is not None and tb > T_target + 40.0:
            break
        P *= 1.25
    plant["pressure"] = float(round(P * r.uniform(1.0, 1.3) / 1e4) * 1e4)
    plant["pressure_unit"] = str(r.choice(["bar", "bar", "kPa"]))
    # effluent analyzer
    if plant["effluent_analyzer"]:
        plant["eff_an_tags"] = {c: tag("AI", "51", chr(ord("A") + i)) for i, c in enumerate(sim.ids)}
        plant["eff_an_cycle"] = int(r.integers(5, 16))
        plant["eff_an_noise"] = r.uniform(0.2, 0.4)  # mol% absolute
        plant["eff_an_basis"] = "mole"
    plant["tags"] = tags_used
    plant["self_check"] = design_self_check(plant, sim)
    return plant


class Balance:
    """The plant's true steady balance (liquid path; each component's sensible heat scaled by
    (1 + cp_error), since a real liquid is not the correlation) and the configured one (no scaling)."""

    def __init__(self, plant, truth=True):
        self.plant = plant
        self.ids = list(plant["ids"])
        self.comps = [Comp(c) for c in self.ids]
        self.s = np.array([1.0 + (plant["cp_error"][c] if truth else 0.0) for c in self.ids])
        rx = plant["reaction"]
        self.nu = np.array([rx["nu"].get(c, 0) for c in self.ids], dtype=float)
        self.key = self.ids.index(rx["key"])

    def comp_vec(self, comp):
        return np.array([comp.get(c, 0.0) for c in self.ids])

    def H(self, T):
        """matrix (ncomp, len(T)) of molar enthalpies."""
        T = np.atleast_1d(T)
        return np.array([c.hf + s * c.dh(T) for c, s in zip(self.comps, self.s)])

    def Cp(self, T):
        T = np.atleast_1d(T)
        return np.array([s * c.cp(T) for c, s in zip(self.comps, self.s)])

    def n_in_design(self):
        return sum(f["F"] * self.comp_vec(f["comp"]) for f in self.plant["feeds"])

    def H_in_design(self):
        return sum(f["F"] * float(self.comp_vec(f["comp"]) @ self.H(f["T"])[:, 0]) for f in self.plant["feeds"])

    def n_out_design(self, X):
        n_in = self.n_in_design()
        xi = X * n_in[self.key] / (-self.nu[self.key])
        return n_in + self.nu * xi

    def solve_T(self, Q, X, UA, Tamb, n_in=None, H_in=None):
        """vectorised: effluent T with f(T) = Σ n_out H(T) + UA (T - Tamb) - H_in - Q = 0."""
        Q = np.atleast_1d(Q)
        if n_in is None:
            n_in = np.repeat(self.n_in_design()[:, None], len(Q), axis=1)
            H_in = np.full(len(Q), self.H_in_design())
        xi = X * n_in[self.key] / (-self.nu[self.key])
        n_out = n_in + self.nu[:, None] * xi
        T = np.full(len(Q), 340.0)
        for _ in range(40):
            f = np.sum(n_out * self.H(T), axis=0) + UA * (T - Tamb) - H_in - Q
            d = np.sum(n_out * self.Cp(T), axis=0) + UA
            step = f / d
            T = np.clip(T - step, 220.0, 560.0)
            if np.max(np.abs(step)) < 1e-9:
                break
        return T

    def duty_for(self, T, X, UA, Tamb):
        n_out = self.n_out_design(X)
        return float(n_out @ self.H(T)[:, 0] + UA * (T - Tamb) - self.H_in_design())

    def cp_flow(self, T, X):
        return float(self.n_out_design(X) @ self.Cp(T)[:, 0])


def design_self_check(plant, sim_truth):
    """The configured model at the design point, solved by our vectorised code and by
    tools/xcheck/model.py: they must agree (a check on our own balance code)."""
    cfg = Balance(plant, truth=False)
    X = plant["X_cfg"]
    Q = plant["Q0"] * (1 + plant["duty_bias"])
    QL = plant["heat_loss_cfg_w"]
    case = {
        "model": {"enthalpy": "liquid-cp"},
        "feed": [{"flow": f["F"], "temperature": f["T"], "composition": {k: v for k, v in f["comp"].items()}}
                 for f in plant["feeds"]],
        "reaction": [{"stoichiometry": plant["reaction"]["nu"], "key": plant["reaction"]["key"], "conversion": X}],
        "heater": {"duty": Q, "heat_loss": QL},
        "solve": {"unknown": "temperature"},
    }
    ref = xmodel.calc(case)["effluent_temperature_k"]
    # our code: heat loss as a fixed number (UA = 0)
    ours = cfg.solve_T(np.array([Q - QL]), X=np.array([X]), UA=0.0, Tamb=0.0)[0]
    if abs(ref - ours) > 1e-6:
        raise AssertionError(f"own balance disagrees with tools/xcheck/model.py: {ours} vs {ref}")
    return {"xcheck_T_out_k": ref, "own_T_out_k": float(ours)}


# ----------------------------------------------------------------------------------------------
# Random processes
# ----------------------------------------------------------------------------------------------
def ou(r, n, sigma, tau):
    """Ornstein-Uhlenbeck series at 1-min steps: stationary sd sigma, correlation time tau (min)."""
    a = math.exp(-1.0 / tau)
    e = r.normal(0.0, sigma * math.sqrt(1 - a * a), n)
    e[0] = r.normal(0.0, sigma)
    return lfilter([1.0], [1.0, -a], e)


def lag1(u, tau, y0):
    a = 1.0 - math.exp(-1.0 / tau)
    y, _ = lfilter([a], [1.0, -(1 - a)], u, zi=[(1 - a) * y0])
    return y


def ramp_into(arr, k, r_len, new):
    old = arr[k - 1] if k > 0 else arr[0]
    r_len = max(1, int(r_len))
    m = min(len(arr) - k, r_len)
    if m <= 0:
        return
    arr[k:k + m] = old + (new - old) * (np.arange(1, m + 1) / r_len)
    arr[k + m:] = new


# ----------------------------------------------------------------------------------------------
# One run: fault schedule, operators, process, instruments
# ----------------------------------------------------------------------------------------------
def draw_fault(plant, kind, r):
    """Onset after >= 2.5 days of normal operation; returns the fault's truth (minutes from start)."""
    day = 1440
    on = int(r.uniform(2.5, 4.0) * day)
    f = {"kind": kind, "onset_min": on, "expected_causes": EXPECTED_CAUSE[kind], "tags": []}
    if kind == "none":
        f.update(onset_min=None, material_min=None, end_min=7 * day)
    elif kind == "fouling":
        e_end = r.uniform(0.88, 0.92)
        D = r.uniform(3.0, 6.0) * day
        f.update(eff_end=e_end, ramp_min=D, material_min=int(on + D * 0.05 / (1 - e_end)))
        f["end_min"] = f["material_min"] + 2 * day
        f["material_def"] = "effectiveness 0.95 (5 % loss)"
    elif kind in ("conversion_up", "conversion_down"):
        M = r.uniform(0.05, 0.07) * (1 if kind == "conversion_up" else -1)
        R = r.uniform(1.0, 3.0) * day
        f.update(delta=M, ramp_min=R, material_min=int(on + R * 0.05 / abs(M)))
        f["end_min"] = f["material_min"] + 2 * day
        f["material_def"] = "conversion shifted by 0.05"
    elif kind in ("effluent_ti_bias", "feed_ti_bias"):
        b = 2.0 * (1 if r.random() < 0.5 else -1)
        dur = int(r.uniform(3.0, 10.0) * 60)
        f.update(bias_k=b, material_min=on, removal_min=on + dur, end_min=on + dur + day)
        if kind == "effluent_ti_bias":
            f["tags"] = [plant["eff_T_tag"]]
        else:
            j = int(np.argmax([fd["F"] for fd in plant["feeds"]]))
            f["feed"] = j
            f["tags"] = [plant["feeds"][j]["temp_tag"]]
        f["material_def"] = "bias onset"
    elif kind in ("flow_stuck", "flow_drift"):
        j = int(np.argmax([fd["F"] for fd in plant["feeds"]]))
        f["feed"] = j
        f["tags"] = [plant["feeds"][j]["flow_tag"]]
        if kind == "flow_stuck":
            f.update(material_min=on, end_min=on + int(1.5 * day), forced_step_min=on + int(r.uniform(60, 240)))
            f["material_def"] = "freeze onset"
        else:
            hours_to_2pct = r.uniform(6.0, 24.0)
            rate = 0.02 / (hours_to_2pct * 60) * (1 if r.random() < 0.5 else -1)
            f.update(rate_per_min=rate, cap=0.06, material_min=int(on + hours_to_2pct * 60))
            f["end_min"] = f["material_min"] + int(1.5 * day)
            f["material_def"] = "meter error reaches 2 % of reading"
    elif kind == "analyzer_frozen":
        if plant["effluent_analyzer"]:
            f["analyzer"] = "effluent"
            f["tags"] = list(plant["eff_an_tags"].values())
            f["cycle_min"] = plant["eff_an_cycle"]
        else:
            js = [j for j, fd in enumerate(plant["feeds"]) if fd["analyzer"]]
            if not js:
                return None
            j = max(js, key=lambda j: plant["feeds"][j]["F"])
            f["analyzer"] = f"feed {j}"
            f["feed"] = j
            f["tags"] = list(plant["feeds"][j]["an_tags"].values())
            f["cycle_min"] = plant["feeds"][j]["an_cycle"]
        f.update(material_min=on, end_min=on + day, forced_comp_step_min=on + int(r.uniform(30, 180)))
        f["material_def"] = "freeze onset"
    elif kind == "heat_loss":
        dT = r.uniform(1.0, 2.5)
        f.update(extra_loss_k=dT, material_min=on, end_min=on + 3 * day)
        f["material_def"] = "step onset"
    return f


def simulate(plant, fault, r):
    """Minute-by-minute simulation. Returns (columns dict tag -> array (NaN = empty), times, truth)."""
    N = int(fault["end_min"])
    day = 1440
    t = np.arange(N)
    feeds = plant["feeds"]
    truth_bal = Balance(plant, truth=True)
    cfg_bal = Balance(plant, truth=False)
    ids = truth_bal.ids
    nc = len(ids)
    start = dt.datetime(2026, 1, 5, tzinfo=dt.timezone.utc) + dt.timedelta(days=int(r.integers(0, 600)))
    tz = ZoneInfo(plant["time_zone"])
    local_h = np.array([(start + dt.timedelta(minutes=int(k))).astimezone(tz).hour for k in range(0, N, 60)])
    # ambient: daily cycle (warmest ~15 h local) plus weather
    hours = np.repeat(local_h, 60)[:N] + (t % 60) / 60.0
    T_amb = 273.15 + plant["T_amb_mean"] + plant["T_amb_amp"] * np.sin(2 * np.pi * (hours - 9.0) / 24.0) \
        + ou(r, N, 1.5, 720.0)

    on = fault["onset_min"]
    kind = fault["kind"]
    # ---- operators' feed-rate steps (setpoint multipliers per feed)
    mult = np.ones((len(feeds), N))
    steps = []
    nsteps = r.poisson(plant["operator"]["feed_steps_per_day"] * N / day)
    times = np.sort(r.uniform(120, N - 30, nsteps)).astype(int)
    times = [k for i, k in enumerate(times) if i == 0 or k - times[i - 1] > 60]
    forced = fault.get("forced_step_min")
    if forced is not None:
        times = sorted([k for k in times if abs(k - forced) > 90] + [forced])
    level = np.ones(len(feeds))
    for k in times:
        if forced is not None and k == forced:
            which = [fault["feed"]]
        elif len(feeds) > 1 and r.random() < 0.4:
            which = [int(r.integers(len(feeds)))]
        else:
            which = list(range(len(feeds)))
        size = r.uniform(0.05, 0.15) * (1 if r.random() < 0.5 else -1)
        new = level.copy()
        for j in which:
            new[j] = float(np.clip(level[j] * (1 + size), 0.75, 1.15))
            if abs(new[j] - level[j]) < 0.03:
                new[j] = float(np.clip(level[j] * (1 - size), 0.75, 1.15))
        rl = int(r.integers(3, 16))
        for j in which:
            ramp_into(mult[j], k, rl, new[j])
        steps.append({"min": int(k), "feeds": which, "from": level.tolist(), "to": new.tolist(), "ramp": rl})
        level = new
    F = np.array([fd["F"] * mult[j] * (1 + ou(r, N, 0.003, 5.0)) for j, fd in enumerate(feeds)])

    # ---- feed temperatures and compositions
    Tf = np.array([fd["T"] + 0.25 * (T_amb - T_amb.mean()) + ou(r, N, 0.6, 600.0) for fd in feeds])
    for j in range(len(feeds)):  # occasional tank switch: a measured step of the feed temperature
        for k in np.sort(r.uniform(0, N, r.poisson(0.3 * N / day))).astype(int):
            Tf[j, k:] += r.uniform(-2.0, 2.0)
    x = []
    comp_steps = []
    for j, fd in enumerate(feeds):
        base = cfg_bal.comp_vec(fd["comp"])
        xj = np.repeat(base[:, None], N, axis=1)
        main = [i for i, c in enumerate(ids) if base[i] > 0 and c != "water"]
        if len(main) and base.max() < 1.0:
            for i in main:
                xj[i] = np.clip(xj[i] + ou(r, N, 0.004 * min(1.0, 3 * base[i]), 900.0), 1e-4, None)
            ks = list(np.sort(r.uniform(0, N, r.poisson(0.25 * N / day))).astype(int))
            fc = fault.get("forced_comp_step_min")
            if fc is not None and (fault.get("feed") == j or (fault.get("analyzer") == "effluent" and j == 0)):
                ks = sorted([k for k in ks if abs(k - fc) > 120] + [fc])
            for k in ks:
                i = max(main, key=lambda i: base[i])
                d = r.uniform(0.01, 0.03) * (1 if r.random() < 0.5 else -1)
                if fc is not None and k == fc:
                    d = math.copysign(r.uniform(0.02, 0.04), d) * min(1.0, 3 * base[i])
                xj[i, k:] = np.clip(xj[i, k:] + d, 1e-4, None)
                comp_steps.append({"min": int(k), "feed": j, "component": ids[i], "delta": float(d)})
        xj = xj / xj.sum(axis=0, keepdims=True)
        x.append(xj)
    x = np.array(x)  # (nfeeds, nc, N)

    # ---- conversion: residence-time effect, catalyst wander, fault; then reactor mixing lag
    Ftot = F.sum(axis=0)
    F0 = sum(fd["F"] for fd in feeds)
    X0 = plant["X0"]
    Da0 = X0 / (1 - X0)
    Da = Da0 * F0 / Ftot
    X = X0 + plant["res_sensitivity"] * (Da / (1 + Da) - X0) + ou(r, N, 0.002, 1440.0)
    if kind in ("conversion_up", "conversion_down"):
        X += fault["delta"] * np.clip((t - on) / fault["ramp_min"], 0.0, 1.0)
    X = lag1(np.clip(X, 0.01, 0.995), plant["tau_res"], X[0])

    eff = np.ones(N)
    if kind == "fouling":
        eff = 1.0 - (1.0 - fault["eff_end"]) * np.clip((t - on) / fault["ramp_min"], 0.0, 1.0)
    UA = np.full(N, plant["UA"])
    if kind == "heat_loss":
        dUA = fault["extra_loss_k"] * plant["Cp_flow"] / max(plant["T_target"] - (273.15 + plant["T_amb_mean"]), 10.0)
        UA[on:] += dUA
        fault["extra_UA_w_k"] = float(dUA)

    # truth balance terms that do not depend on the duty
    n_in = np.einsum("jn,jin->in", F, x)
    H_in = np.zeros(N)
    for j in range(len(feeds)):
        H_in += F[j] * np.sum(x[j] * truth_bal.H(Tf[j]), axis=0)

    # ---- instruments that the operators read: reported feed flows and temperatures
    rep_F = np.array([F[j] * (1 + fd["flow_bias"]) * (1 + r.normal(0, fd["flow_noise"], N)) for j, fd in enumerate(feeds)])
    rep_Tf = np.array([Tf[j] + fd["T_bias"] + r.normal(0, fd["T_noise"], N) for j, fd in enumerate(feeds)])
    if kind == "feed_ti_bias":
        rep_Tf[fault["feed"], on:fault["removal_min"]] += fault["bias_k"]
    if kind == "flow_stuck":
        rep_F[fault["feed"], on:] = rep_F[fault["feed"], on - 1]
    if kind == "flow_drift":
        err = np.clip(fault["rate_per_min"] * (t - on), -fault["cap"], fault["cap"])
        err[t < on] = 0.0
        rep_F[fault["feed"]] *= 1 + err

    # ---- duty: operators' decisions, process dynamics
    dn = 1 + ou(r, N, plant["duty_noise"], 3.0)  # steam header / firing fluctuation
    D_set = np.full(N, plant["Q0"])
    T_ss = np.zeros(N)
    done = 0
    theta = plant["dead_time"]
    tau = plant["lag"]
    ar = plant["eff_T_ar"]
    eff_noise = lfilter([1.0], [1.0, -ar], r.normal(0, plant["eff_T_noise"] * math.sqrt(1 - ar * ar), N))
    bias = np.zeros(N)
    if kind == "effluent_ti_bias":
        bias[on:fault["removal_min"]] = fault["bias_k"]
    T_start = truth_bal.solve_T(np.array([plant["Q0"] * dn[0] * eff[0]]), X=X[:1], UA=UA[0], Tamb=T_amb[:1],
                                n_in=n_in[:, :1], H_in=H_in[:1])[0]

    def fill(k):
        nonlocal done
        if k > done:
            sl = slice(done, k)
            T_ss[sl] = truth_bal.solve_T(D_set[sl] * dn[sl] * eff[sl], X=X[sl], UA=UA[sl], Tamb=T_amb[sl],
                                         n_in=n_in[:, sl], H_in=H_in[sl])
            done = k

    def measured_until(k):
        fill(k)
        u = np.concatenate([np.full(theta, T_start), T_ss[:k]])[:k]
        y = lag1(u, tau, T_start)
        return y + eff_noise[:k] + bias[:k]

    op = plant["operator"]
    cp_est = plant["Cp_flow"] * op["gain_err"]

    def q_required(k, after):
        """operators' estimate of the duty for the target at the flows/temps they see at k
        (configured model: design conversion, design compositions, configured heat loss)."""
        Fk = rep_F[:, max(0, k - 10):k + 1].mean(axis=1) if after is False else rep_F[:, k + 10:k + 21].mean(axis=1)
        nin = sum(Fk[j] * cfg_bal.comp_vec(fd["comp"]) for j, fd in enumerate(feeds))
        hin = sum(Fk[j] * float(cfg_bal.comp_vec(fd["comp"]) @ cfg_bal.H(rep_Tf[j, k])[:, 0]) for j, fd in enumerate(feeds))
        xi = plant["X_cfg"] * nin[cfg_bal.key] / (-cfg_bal.nu[cfg_bal.key])
        nout = nin + cfg_bal.nu * xi
        return float(nout @ cfg_bal.H(plant["T_target"])[:, 0]) - hin + plant["heat_loss_cfg_w"]

    events = []  # (minute, kind, payload)
    for s in steps:
        events.append((s["min"] - 1, 0, "pre", s))
        events.append((s["min"] + int(r.integers(*op["delay"])), 1, "follow", s))
    # shift changes (local) and half-hourly rounds
    for k in range(0, N, 30):
        lt = (start + dt.timedelta(minutes=k)).astimezone(tz).strftime("%H:%M")
        if lt in plant["shifts"]:
            events.append((k, 2, "shift", None))
        elif k > 0:
            events.append((k, 3, "round", None))
    events.sort(key=lambda e: (e[0], e[1]))
    decisions = []
    pre_q = {}
    for k, _, ev, s in events:
        if k <= 0 or k >= N:
            continue
        if ev == "pre":
            pre_q[id(s)] = q_required(k, False)
            continue
        if ev == "follow":
            dq = q_required(min(k, N - 22), True) - pre_q.pop(id(s))
            new = D_set[k - 1] + dq * (1 + r.normal(0, 0.05))
            rl = int(r.integers(2, 10))
        else:
            Tm = measured_until(k)[-15:].mean()
            dev = plant["T_target"] - Tm
            thr = op["trim_threshold"] if ev == "shift" else 3.0
            if abs(dev) < thr:
                continue
            new = D_set[k - 1] + cp_est * dev
            rl = int(r.integers(2, 6))
        new = max(new, 0.05 * plant["Q0"])
        fill(k)
        ramp_into(D_set, k, rl, new)
        decisions.append({"min": int(k), "why": ev, "duty_w": float(new)})
    fill(N)
    T_meas_true = measured_until(N) - bias - eff_noise  # process side, no sensor error
    T_eff_rep = T_meas_true + eff_noise + bias
    Q_actual = D_set * dn
    D_rep = Q_actual * (1 + plant["duty_bias"]) * (1 + r.normal(0, 0.001, N))

    # effluent composition (true, at the outlet, delayed by the dead time)
    xi = X * n_in[truth_bal.key] / (-truth_bal.nu[truth_bal.key])
    n_out = n_in + truth_bal.nu[:, None] * xi
    x_out = n_out / n_out.sum(axis=0, keepdims=True)
    x_out = np.concatenate([np.repeat(x_out[:, :1], theta, axis=1), x_out], axis=1)[:, :N]

    # ---- write columns (engineering units), NaN = empty cell
    cols = {}
    for j, fd in enumerate(feeds):
        Fu = rep_F[j]
        if fd["flow_unit"] in ("t/h", "kg/h"):
            mbar = np.einsum("in,i->n", x[j], np.array([c.M for c in truth_bal.comps])) / 1000.0  # kg/mol true
            Fu = Fu * mbar
        cols[fd["flow_tag"]] = (to_unit(Fu, fd["flow_unit"]), flow_decimals(fd["flow_unit"], np.median(to_unit(Fu, fd["flow_unit"]))))
        cols[fd["temp_tag"]] = (to_unit(rep_Tf[j], plant["temp_unit"]), 2)
        if fd["analyzer"]:
            frac = x[j]
            if fd["basis"] == "mass":
                m = frac * np.array([c.M for c in truth_bal.comps])[:, None]
                frac = m / m.sum(axis=0, keepdims=True)
            held = analyzer(r, frac, fd["an_cycle"], fd["an_noise"], N)
            if kind == "analyzer_frozen" and fault.get("feed") == j:
                held[:, on:] = held[:, on - 1:on]
            for i, c in enumerate(ids):
                if c in fd["an_tags"]:
                    cols[fd["an_tags"][c]] = (held[i], 2)
    cols[plant["duty_tag"]] = (to_unit(D_rep, plant["duty_unit"]), flow_decimals(None, np.median(to_unit(D_rep, plant["duty_unit"]))))
    cols[plant["eff_T_tag"]] = (quant(to_unit(T_eff_rep, plant["temp_unit"]), plant["eff_T_q"]), 2)
    if plant["pressure_tag"]:
        P = plant["pressure"] * (1 + ou(r, N, 0.004, 60.0))
        cols[plant["pressure_tag"]] = (to_unit(P, plant["pressure_unit"]), 3 if plant["pressure_unit"] == "bar" else 1)
    if plant["ambient_tag"]:
        cols[plant["ambient_tag"]] = (to_unit(T_amb + r.normal(0, 0.1, N), plant["temp_unit"]), 1)
    if plant["effluent_analyzer"]:
        held = analyzer(r, x_out, plant["eff_an_cycle"], plant["eff_an_noise"], N)
        if kind == "analyzer_frozen" and fault.get("analyzer") == "effluent":
            held[:, on:] = held[:, on - 1:on]
        for i, c in enumerate(ids):
            cols[plant["eff_an_tags"][c]] = (held[i], 2)

    # ---- data gaps: whole export rows missing, or one transmitter out (empty cells)
    gaps = []
    keep_out = [(0, 360)]
    if on is not None:
        keep_out.append((on - 180, int(fault["material_min"]) + 720))
        if "removal_min" in fault:
            keep_out.append((fault["removal_min"] - 60, fault["removal_min"] + 180))
    for _ in range(r.poisson(0.6 * N / (7 * day))):
        length = int(math.exp(r.uniform(math.log(60), math.log(1440))))
        for _try in range(20):
            s0 = int(r.uniform(0, N - length))
            if all(s0 + length < a or s0 > b for a, b in keep_out) and all(s0 + length < g["start_min"] - 60 or
                                                                        s0 > g["end_min"] + 60 for g in gaps):
                if r.random() < 0.6:
                    g = {"start_min": s0, "end_min": s0 + length, "what": "rows", "tags": []}
                else:
                    tg = str(r.choice(list(cols)))
                    # an analyzer is out as a whole
                    grp = [tg]
                    for fd in feeds:
                        if fd["analyzer"] and tg in fd["an_tags"].values():
                            grp = list(fd["an_tags"].values())
                    if plant["effluent_analyzer"] and tg in plant["eff_an_tags"].values():
                        grp = list(plant["eff_an_tags"].values())
                    g = {"start_min": s0, "end_min": s0 + length, "what": "tags", "tags": grp}
                gaps.append(g)
                break
    row_ok = np.ones(N, dtype=bool)
    for g in gaps:
        if g["what"] == "rows":
            row_ok[g["start_min"]:g["end_min"]] = False
        else:
            for tg in g["tags"]:
                v, d = cols[tg]
                v = v.copy()
                v[g["start_min"]:g["end_min"]] = np.nan
                cols[tg] = (v, d)

    truth = {
        "start": start.isoformat().replace("+00:00", "Z"), "minutes": N,
        "fault": fault, "gaps": gaps, "feed_steps": steps, "composition_steps": comp_steps,
        "duty_decisions": decisions[:400],
        "summary": {
            "T_out_true_k": [float(T_meas_true.min()), float(np.median(T_meas_true)), float(T_meas_true.max())],
            "duty_w": [float(Q_actual.min()), float(np.median(Q_actual)), float(Q_actual.max())],
            "conversion": [float(X.min()), float(np.median(X)), float(X.max())],
        },
    }
    return cols, row_ok, start, truth


def quant(v, q):
    return np.round(v / q) * q


def flow_decimals(unit, typical):
    """about five significant digits, as a plant data system shows them"""
    return int(max(0, 4 - math.floor(math.log10(max(abs(typical), 1e-6)))))


def analyzer(r, frac, cycle, noise_pct, N):
    """Sample-and-hold analyzer: a sample every `cycle` min, reported one cycle later and held.
    Each component is reported separately in %, with absolute noise; the reading as a whole is
    not normalised (each reading sums to 99.2-100.8 %)."""
    nc = frac.shape[0]
    phase = int(r.integers(0, cycle))
    samples = np.arange(phase, N, cycle)
    present = frac.max(axis=1) > 0
    vals = frac[:, samples] * 100.0 + r.normal(0, noise_pct, (nc, len(samples))) * present[:, None]
    vals = np.clip(vals, 0.0, 100.0)
    vals *= (r.uniform(99.2, 100.8, len(samples)) / vals.sum(axis=0))[None, :]
    k = np.arange(N)
    n = (k - phase) // cycle - 1  # the sample taken one cycle before the last report
    n = np.clip(n, 0, len(samples) - 1)
    return np.round(vals[:, n], 2)


# ----------------------------------------------------------------------------------------------
# Files: exports, site file, truth
# ----------------------------------------------------------------------------------------------
def write_exports(dirpath, plant, cols, row_ok, start):
    os.makedirs(dirpath, exist_ok=True)
    r = np.random.default_rng([plant["seed"], plant["index"], 99])
    names = list(cols)
    r.shuffle(names)
    N = len(row_ok)
    fmt_cols = []
    for name in names:
        v, d = cols[name]
        s = np.char.mod(f"%.{d}f", v)
        s = np.where(np.isnan(v), "", s)
        fmt_cols.append(s)
    mat = np.array(fmt_cols).T
    base = start
    header = "Timestamp," + ",".join(names) + "\n"
    files = {}
    for k in range(N):
        if not row_ok[k]:
            continue
        ts = base + dt.timedelta(minutes=k)
        day = ts.strftime("%Y%m%d")
        if day not in files:
            files[day] = [header]
        files[day].append(ts.strftime("%Y-%m-%dT%H:%M:%SZ") + "," + ",".join(mat[k]) + "\n")
    for day, lines in files.items():
        with open(os.path.join(dirpath, f"{plant['prefix']}-{plant['unit'].lower().replace('-', '')}_{day}.csv"), "w") as fh:
            fh.writelines(lines)


def q(s):
    return json.dumps(s)


def site_toml(plant, fault, run_id):
    p = plant
    L = []
    a = L.append
    a(f"# {p['site']} (invented), reactor {p['unit']}: {p['description']}.")
    a(f"# Generated by tools/zoo (plant {p['index']} of seed {p['seed']}, run {run_id}); the truth is in truth.json.")
    a("[site]")
    a(f"name = {q(p['site'])}")
    a(f"time_zone = {q(p['time_zone'])}")
    a('state_dir = "state"')
    a('output_dir = "output"')
    a("shifts = [" + ", ".join(q(s) for s in p["shifts"]) + "]")
    a("shift_reports = false")
    a("")
    a("[service]")
    a('http_address = "off"')
    a("")
    a("[[unit]]")
    a(f"name = {q(p['unit'])}")
    a(f"description = {q(p['description'])}")
    a("[unit.input]")
    a('directory = "exports"')
    a(f"pattern = {q(p['prefix'] + '-' + p['unit'].lower().replace('-', '') + '_*.csv')}")
    a('layout = "wide"')
    a('timestamp_column = "Timestamp"')
    a('timestamp_format = "rfc3339"')
    a("")
    a("[unit.model]")
    a('enthalpy = "auto"')
    if p["pressure_tag"]:
        a(f"pressure = {{ tag = {q(p['pressure_tag'])}, unit = {q(p['pressure_unit'])} }}")
    else:
        a(f"pressure = {{ value = \"{p['pressure'] / 1e5:.2f} bar\" }}")
    if p["accepted_flags"]:
        a("accepted_flags = [" + ", ".join(q(s) for s in p["accepted_flags"]) + "]")
    tu = p["temp_unit"]
    for fd in p["feeds"]:
        a("")
        a("[[unit.feed]]")
        a(f"name = {q(fd['name'])}")
        fu = f"{'1.5' if fd['flow_noise'] > 0.004 else '1'} %"
        a(f"flow = {{ tag = {q(fd['flow_tag'])}, unit = {q(fd['flow_unit'])}, uncertainty = {q(fu)} }}")
        a(f"temperature = {{ tag = {q(fd['temp_tag'])}, unit = {q(tu)}, uncertainty = \"0.5 K\" }}")
        a(f"basis = {q(fd['basis'])}")
        if fd["analyzer"]:
            a("normalize = true")
            a("[unit.feed.composition]")
            for c, tg in fd["an_tags"].items():
                a(f"{tid(c)} = {{ tag = {q(tg)}, unit = \"%\", kind = \"analyzer\", uncertainty = \"0.3 %\" }}")
        else:
            comp = fd["comp_cfg"]
            if fd["basis"] == "mass":
                m = {c: v * LIB[c]["molar_mass"] for c, v in comp.items()}
                s = sum(m.values())
                comp = {c: round(v / s, 4) for c, v in m.items()}
                s = sum(comp.values())
                big = max(comp, key=comp.get)
                comp[big] = round(comp[big] + 1.0 - s, 4)
            a("composition = { " + ", ".join(f"{tid(c)} = {v:.4f}" for c, v in comp.items()) + " }")
    a("")
    a("[unit.heater]")
    a(f"duty = {{ tag = {q(p['duty_tag'])}, unit = {q(p['duty_unit'])}, uncertainty = \"2 %\" }}")
    if p["heat_loss_cfg"] == "value":
        hl = p["heat_loss_cfg_w"] / 1e3
        a(f"heat_loss = {{ value = \"{hl:.1f} kW\", uncertainty = \"{max(0.5 * hl, 0.5):.1f} kW\" }}")
    a("")
    a("[unit.effluent]")
    a(f"temperature = {{ tag = {q(p['eff_T_tag'])}, unit = {q(tu)}, uncertainty = \"0.4 K\" }}")
    if p["effluent_analyzer"]:
        a(f"basis = {q(p['eff_an_basis'])}")
        a("[unit.effluent.composition]")
        for c, tg in p["eff_an_tags"].items():
            a(f"{tid(c)} = {{ tag = {q(tg)}, unit = \"%\", kind = \"analyzer\", uncertainty = \"0.3 %\" }}")
    # The reaction is configured either way: with an effluent analyzer its extent is estimated
    # from the analysis (the design conversion is only the starting point).
    rx = p["reaction"]
    a("")
    a("[[unit.reaction]]")
    a(f"name = {q(rx['name'])}")
    a("stoichiometry = { " + ", ".join(f"{tid(c)} = {v}" for c, v in rx["nu"].items()) + " }")
    a(f"key = {q(tid(rx['key']))}")
    a(f"design_conversion = {p['X_cfg']:.3f}")
    a("conversion_uncertainty = 0.02")
    if p["ambient_tag"]:
        a("")
        a("[unit.ambient]")
        a(f"temperature = {{ tag = {q(p['ambient_tag'])}, unit = {q(tu)} }}")
    if p["knows_dynamics"]:
        dtm = max(1, round(p["dead_time"] * p["dyn_cfg_err"][0]))
        lg = max(1, round(p["lag"] * p["dyn_cfg_err"][1]))
        a("")
        a("[unit.monitor]               # the plant's known dynamics; every other monitor setting is the default")
        a(f'dead_time = "{dtm}m"')
        a(f'lag = "{lg}m"')
    return "\n".join(L) + "\n"


def make_run(out_dir, seed, plant_index, kind, run_no):
    """Draw plant `plant_index`, inject `kind`, write OUT/runs/<id>/{site.toml, exports/, truth.json}.
    Returns the run id, or None when the plant cannot carry this fault (no analyzer to freeze)."""
    plant = draw_plant(seed, plant_index)
    r = np.random.default_rng([seed, plant_index, 1 + run_no])
    fault = draw_fault(plant, kind, r)
    if fault is None:
        return None
    run_id = f"p{plant_index:02d}-{kind}"
    d = os.path.join(out_dir, "runs", run_id)
    if os.path.exists(d):
        import shutil
        shutil.rmtree(d)
    os.makedirs(d)
    cols, row_ok, start, truth = simulate(plant, fault, r)
    write_exports(os.path.join(d, "exports"), plant, cols, row_ok, start)
    with open(os.path.join(d, "site.toml"), "w") as fh:
        fh.write(site_toml(plant, fault, run_id))
    truth["plant"] = plant
    truth["run_id"] = run_id
    with open(os.path.join(d, "truth.json"), "w") as fh:
        json.dump(truth, fh, indent=1, default=float)
    return run_id


if __name__ == "__main__":
    import argparse
    ap = argparse.ArgumentParser(description="draw one zoo plant and write one run")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--plant", type=int, default=0)
    ap.add_argument("--fault", default="none", choices=FAULT_KINDS)
    ap.add_argument("--out", default="target/zoo-one")
    a = ap.parse_args()
    print(make_run(a.out, a.seed, a.plant, a.fault, FAULT_KINDS.index(a.fault)))
