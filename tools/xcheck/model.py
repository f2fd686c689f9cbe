"""Independent re-implementation of the efftemp `calc` steady-state enthalpy balance.

Written from the product design (physics and case-file sections), the README's `calc` section and the shared thermo
reference (gen_reference.py formulas). Published methods only: heat-of-formation method at
298.15 K, Watson correlation, DIPPR-100 liquid Cp, DIPPR-101 vapour pressure, Raoult's law.
"""
from __future__ import annotations

import math
import os
import re
import tomllib
from dataclasses import dataclass, field

from scipy.optimize import brentq

T0 = 298.15
DEFAULT_WATSON_N = 0.38
LIB_PATH = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "config", "components.toml")

# ----------------------------------------------------------------------------------------------
# Units (standard exact definitions)
# ----------------------------------------------------------------------------------------------
LB = 0.45359237            # kg
CAL_IT = 4.1868            # J
BTU_IT = 1055.05585262     # J
PSI = 6894.757293168       # Pa
ATM = 101325.0             # Pa
MMHG = ATM / 760.0         # Pa

# value_SI = factor * value + offset
UNITS = {
    "temperature": {
        "K": (1.0, 0.0), "degC": (1.0, 273.15), "°C": (1.0, 273.15),
        "degF": (5.0 / 9.0, 459.67 * 5.0 / 9.0), "°F": (5.0 / 9.0, 459.67 * 5.0 / 9.0),
        "degR": (5.0 / 9.0, 0.0),
    },
    "molar_flow": {
        "mol/s": (1.0, 0.0), "mol/min": (1.0 / 60, 0.0), "mol/h": (1.0 / 3600, 0.0),
        "kmol/s": (1000.0, 0.0), "kmol/min": (1000.0 / 60, 0.0), "kmol/h": (1000.0 / 3600, 0.0),
        "lbmol/h": (LB * 1000.0 / 3600, 0.0),
    },
    "mass_flow": {  # kg/s
        "kg/s": (1.0, 0.0), "kg/min": (1.0 / 60, 0.0), "kg/h": (1.0 / 3600, 0.0),
        "g/s": (1e-3, 0.0), "t/h": (1000.0 / 3600, 0.0), "t/d": (1000.0 / 86400, 0.0),
        "lb/h": (LB / 3600, 0.0), "klb/h": (LB * 1000.0 / 3600, 0.0),
    },
    "heat_flow": {
        "W": (1.0, 0.0), "kW": (1e3, 0.0), "MW": (1e6, 0.0), "J/s": (1.0, 0.0),
        "kJ/h": (1e3 / 3600, 0.0), "MJ/h": (1e6 / 3600, 0.0), "GJ/h": (1e9 / 3600, 0.0),
        "kcal/h": (CAL_IT * 1e3 / 3600, 0.0), "Mcal/h": (CAL_IT * 1e6 / 3600, 0.0),
        "Gcal/h": (CAL_IT * 1e9 / 3600, 0.0),
        "Btu/h": (BTU_IT / 3600, 0.0), "kBtu/h": (BTU_IT * 1e3 / 3600, 0.0),
        "MMBtu/h": (BTU_IT * 1e6 / 3600, 0.0),
    },
    "pressure": {
        "Pa": (1.0, 0.0), "kPa": (1e3, 0.0), "MPa": (1e6, 0.0), "bar": (1e5, 0.0),
        "mbar": (100.0, 0.0), "atm": (ATM, 0.0), "psi": (PSI, 0.0), "psia": (PSI, 0.0),
        "mmHg": (MMHG, 0.0),
    },
    "molar_energy": {
        "J/mol": (1.0, 0.0), "kJ/mol": (1e3, 0.0), "kJ/kmol": (1.0, 0.0), "MJ/kmol": (1e3, 0.0),
    },
    "molar_mass": {"g/mol": (1.0, 0.0), "kg/kmol": (1.0, 0.0), "kg/mol": (1000.0, 0.0)},
}


class CaseError(Exception):
    pass


def split_unit(v):
    m = re.fullmatch(r"\s*([-+0-9.eE]+)\s*(\S.*?)?\s*", v)
    if not m:
        raise CaseError(f"cannot parse quantity {v!r}")
    return float(m.group(1)), (m.group(2) or "")


def conv(v, *quantities):
    """Convert a TOML number or a '<number> <unit>' string. Returns (value_SI, quantity)."""
    if isinstance(v, (int, float)) and not isinstance(v, bool):
        return float(v), quantities[0]
    num, unit = split_unit(v)
    for q in quantities:
        if unit in UNITS[q]:
            f, o = UNITS[q][unit]
            return f * num + o, q
    raise CaseError(f"unknown unit {unit!r} for {quantities}")


# ----------------------------------------------------------------------------------------------
# Components
# ----------------------------------------------------------------------------------------------
def norm_id(s: str) -> str:
    return s.strip().lower().replace("_", "-")


@dataclass
class Comp:
    id: str
    molar_mass: float
    tb: float
    tc: float
    hvap_tb: float
    hf_ig: float
    cp_ig: list
    watson_n: float | None = None
    hf_liq: float | None = None
    cp_liq: list | None = None
    psat: list | None = None
    formula: str | None = None
    cp_liq_range: list | None = None
    pc: float | None = None
    omega: float | None = None

    # --- ideal gas + Watson path
    def cp_ig_at(self, T):
        A, B, C, D, E = self.cp_ig
        return A + T * (B + T * (C + T * (D + T * E)))

    def int_cp(self, c, T):
        return sum(c[k] / (k + 1) * (T ** (k + 1) - T0 ** (k + 1)) for k in range(5))

    def watson(self, T, n):
        if T >= self.tc:
            return 0.0
        return self.hvap_tb * ((self.tc - T) / (self.tc - self.tb)) ** n

    def h(self, T, path, n):
        if path == "liquid-cp":
            return self.hf_liq + self.int_cp(self.cp_liq, T)
        return self.hf_ig + self.int_cp(self.cp_ig, T) - self.watson(T, n)

    def cp(self, T, path, n):
        if path == "liquid-cp":
            c = self.cp_liq
            return c[0] + T * (c[1] + T * (c[2] + T * (c[3] + T * c[4])))
        extra = 0.0 if T >= self.tc else n * self.watson(T, n) / (self.tc - T)
        return self.cp_ig_at(T) + extra

    def psat_at(self, T):
        if self.psat is None:
            # Lee-Kesler generalized correlation (Lee and Kesler 1975) from tc, pc, omega
            Tr = T / self.tc
            lt = math.log(Tr)
            f0 = 5.92714 - 6.09648 / Tr - 1.28862 * lt + 0.169347 * Tr ** 6
            f1 = 15.2518 - 15.6875 / Tr - 13.4721 * lt + 0.43577 * Tr ** 6
            return self.pc * math.exp(f0 + self.omega * f1)
        c1, c2, c3, c4, c5 = self.psat
        return math.exp(c1 + c2 / T + c3 * math.log(T) + c4 * T ** c5)

    def has_psat(self):
        return self.psat is not None or (self.pc is not None and self.omega is not None)


LIB_RAW = None


def library():
    global LIB_RAW
    if LIB_RAW is None:
        with open(LIB_PATH, "rb") as f:
            LIB_RAW = {norm_id(k): v for k, v in tomllib.load(f)["components"].items()}
    return LIB_RAW


ENERGY_KEYS = ("hvap_tb", "hf_ig", "hf_liq")


def build_comp(cid, inline):
    raw = dict(library().get(cid, {}))
    if inline is not None:
        raw.update(inline)
    if not raw:
        raise CaseError(f"unknown component {cid!r}")
    need = ["molar_mass", "tb", "tc", "hvap_tb", "hf_ig", "cp_ig"]
    for k in need:
        if k not in raw:
            raise CaseError(f"component {cid}: missing {k}")
    g = lambda k, q: conv(raw[k], q)[0] if k in raw else None
    c = Comp(
        id=cid,
        molar_mass=g("molar_mass", "molar_mass"),
        tb=g("tb", "temperature"), tc=g("tc", "temperature"),
        hvap_tb=g("hvap_tb", "molar_energy"), hf_ig=g("hf_ig", "molar_energy"),
        cp_ig=[float(x) for x in raw["cp_ig"]],
        watson_n=float(raw["watson_n"]) if "watson_n" in raw else None,
        hf_liq=g("hf_liq", "molar_energy"),
        cp_liq=[float(x) for x in raw["cp_liq"]] if "cp_liq" in raw else None,
        psat=[float(x) for x in raw["psat"]] if "psat" in raw else None,
        formula=raw.get("formula"),
        cp_liq_range=raw.get("cp_liq_range"),
        pc=g("pc", "pressure"),
        omega=float(raw["omega"]) if "omega" in raw else None,
    )
    if c.tc <= c.tb:
        raise CaseError(f"component {cid}: tc <= tb")
    return c


def parse_formula(f):
    out = {}
    for el, n in re.findall(r"([A-Z][a-z]?)(\d*)", f):
        out[el] = out.get(el, 0) + (int(n) if n else 1)
    return out


# ----------------------------------------------------------------------------------------------
# The calculation
# ----------------------------------------------------------------------------------------------
def fractions(comp_tbl, basis, comps, normalize, where):
    x = {norm_id(k): float(v) for k, v in comp_tbl.items()}
    s = sum(x.values())
    if any(v < 0 for v in x.values()):
        raise CaseError(f"{where}: negative fraction")
    if abs(s - 1.0) > 1e-3 and not normalize:
        raise CaseError(f"{where}: fractions sum to {s}")
    x = {k: v / s for k, v in x.items()}
    if basis == "mass":
        m = {k: v / comps[k].molar_mass for k, v in x.items()}
        t = sum(m.values())
        x = {k: v / t for k, v in m.items()}
    return x


def calc(case: dict) -> dict:
    """Compute the result of one case (dict parsed from the case TOML)."""
    model = case.get("model", {})
    inline = {norm_id(k): v for k, v in case.get("components", {}).items()}
    # collect component ids in order of appearance
    ids = []

    def add(k):
        k = norm_id(k)
        if k not in ids:
            ids.append(k)
    for f in case["feed"]:
        for k in f["composition"]:
            add(k)
    for r in case.get("reaction", []):
        for k in r["stoichiometry"]:
            add(k)
    eff = case.get("effluent", {})
    for k in eff.get("composition", {}):
        add(k)
    comps = {k: build_comp(k, inline.get(k)) for k in ids}

    setting = model.get("enthalpy", "auto")
    overrides = {norm_id(k): v for k, v in model.get("component_enthalpy", {}).items()}
    n_default = float(model.get("watson_n", DEFAULT_WATSON_N))
    path, nexp = {}, {}
    for k, c in comps.items():
        s = overrides.get(k, setting)
        has_liq = c.hf_liq is not None and c.cp_liq is not None
        if s == "auto":
            p = "liquid-cp" if has_liq else "ideal-gas-watson"
        elif s == "liquid-cp":
            if not has_liq:
                raise CaseError(f"component {k}: no liquid data for liquid-cp")
            p = "liquid-cp"
        elif s == "ideal-gas-watson":
            p = "ideal-gas-watson"
        else:
            raise CaseError(f"bad enthalpy setting {s!r}")
        path[k] = p
        nexp[k] = c.watson_n if c.watson_n is not None else n_default

    def H(k, T):
        return comps[k].h(T, path[k], nexp[k])

    def Cp(k, T):
        return comps[k].cp(T, path[k], nexp[k])

    # ---- feeds
    n_in = {k: 0.0 for k in ids}
    evals = []   # (temperature, components evaluated there) for the validity flags
    H_in = 0.0
    m_in = 0.0
    feed_ctx = []   # per feed, what the uncertainty propagation needs
    for i, f in enumerate(case["feed"]):
        x = fractions(f["composition"], f.get("basis", "mole"), comps, f.get("normalize", False),
                      f"feed[{i + 1}].composition")
        F, q = conv(f["flow"], "molar_flow", "mass_flow")
        F_given = F
        if q == "mass_flow":
            mbar = sum(x[k] * comps[k].molar_mass for k in x) / 1000.0  # kg/mol
            F = F / mbar
        Tf = conv(f["temperature"], "temperature")[0]
        s_raw = sum(float(v) for v in f["composition"].values())
        feed_ctx.append({"raw": f, "index": i, "flow_quantity": q, "flow_given": F_given, "flow_mol_s": F,
                         "T": Tf, "basis": f.get("basis", "mole"),
                         "written": {norm_id(k): k for k in f["composition"]},
                         "w": {norm_id(k): float(v) / s_raw for k, v in f["composition"].items()}})
        evals.append((Tf, {k for k, v in x.items() if v > 0}))
        for k, v in x.items():
            n_in[k] += F * v
            H_in += F * v * H(k, Tf)
            m_in += F * v * comps[k].molar_mass / 1000.0

    heater = case.get("heater", {})
    Q_loss = conv(heater.get("heat_loss", 0.0), "heat_flow")[0]
    unknown = case.get("solve", {}).get("unknown", "temperature")
    Q = conv(heater["duty"], "heat_flow")[0] if "duty" in heater else None
    T_eff = conv(eff["temperature"], "temperature")[0] if "temperature" in eff else None

    reactions = case.get("reaction", [])
    stoich = [{norm_id(k): float(v) for k, v in r["stoichiometry"].items()} for r in reactions]
    keys = [norm_id(r["key"]) for r in reactions] if reactions else []

    def outflows(conversions):
        n = dict(n_in)
        xis = []
        for r, nu, key, X in zip(reactions, stoich, keys, conversions):
            xi = X * n_in[key] / (-nu[key])
            xis.append(xi)
            for k, v in nu.items():
                n[k] += v * xi
        return n, xis

    result = {"enthalpy_path": dict(path)}
    conversions = None
    solve_idx = None
    eff_ctx = None
    if "composition" in eff:
        x = fractions(eff["composition"], eff.get("basis", "mole"), comps, eff.get("normalize", False),
                      "effluent.composition")
        s_raw = sum(float(v) for v in eff["composition"].values())
        eff_ctx = {"basis": eff.get("basis", "mole"), "written": {norm_id(k): k for k in eff["composition"]},
                   "w": {norm_id(k): float(v) / s_raw for k, v in eff["composition"].items()}}
        mbar = sum(x[k] * comps[k].molar_mass for k in x) / 1000.0
        Ft = m_in / mbar
        n_out = {k: Ft * x.get(k, 0.0) for k in ids}
        xis = []
    elif reactions:
        conversions = [r.get("conversion") for r in reactions]
        if unknown == "conversion":
            solve_idx = [i for i, c in enumerate(conversions) if c is None][0]
            conversions[solve_idx] = 0.0
        conversions = [float(c) for c in conversions]
        n_out, xis = outflows(conversions)
    else:
        n_out, xis = dict(n_in), []

    def H_out(n, T):
        return sum(v * H(k, T) for k, v in n.items() if v != 0.0)

    if unknown == "temperature":
        target = H_in + Q - Q_loss
        lo, hi = 200.0, 1000.0
        if "temperature_range" in model:
            lo = conv(model["temperature_range"][0], "temperature")[0]
            hi = conv(model["temperature_range"][1], "temperature")[0]
        g = lambda T: H_out(n_out, T) - target
        # The physical root is the lowest upward crossing (dH/dT = effective Cp > 0 there).
        # Scan in 1 K steps so that correlations extrapolated to a negative Cp far above the
        # root (e.g. DIPPR-100 cubics of 2-propanol or ethylene oxide above ~650 K) cannot hide it.
        steps = max(1, int(math.ceil(hi - lo)))
        a, ga = lo, g(lo)
        T_out = None
        if ga == 0.0:
            T_out = lo
        for i in range(1, steps + 1):
            if T_out is not None:
                break
            b = lo + (hi - lo) * i / steps
            gb = g(b)
            if ga < 0.0 <= gb:
                T_out = brentq(g, a, b, xtol=1e-13, rtol=4 * 2.220446049250313e-16, maxiter=500)
            a, ga = b, gb
        if T_out is None:
            raise CaseError("no root")
    elif unknown == "duty":
        T_out = T_eff
        Q = H_out(n_out, T_out) - H_in + Q_loss
    elif unknown == "conversion":
        T_out = T_eff
        target = H_in + Q - Q_loss
        # H_out is linear in the conversion at fixed T: solve exactly
        conversions[solve_idx] = 0.0
        n0, _ = outflows(conversions)
        conversions[solve_idx] = 1.0
        n1, _ = outflows(conversions)
        h0, h1 = H_out(n0, T_out), H_out(n1, T_out)
        X = (target - h0) / (h1 - h0)
        conversions[solve_idx] = X
        n_out, xis = outflows(conversions)
    else:
        raise CaseError(f"bad unknown {unknown}")

    for k, v in n_out.items():
        if v < -1e-12 * max(1.0, sum(n_in.values())):
            raise CaseError(f"negative effluent flow of {k}")
    F_out = sum(n_out.values())
    evals.append((T_out, {k for k, v in n_out.items() if v > 0}))
    result["_evals"] = evals
    # spelling of each id in the labels: its first occurrence in the feeds, then in the effluent (observed)
    display = {}
    for f in case["feed"]:
        for k in f["composition"]:
            display.setdefault(norm_id(k), k)
    for k in eff.get("composition", {}):
        display.setdefault(norm_id(k), k)
    result["_ctx"] = {"display": display, "H": H, "Cp": Cp, "comps": comps, "feeds": feed_ctx, "eff": eff_ctx, "n_in": n_in,
                      "n_out": n_out, "m_in": m_in, "stoich": stoich, "keys": keys,
                      "conversions": list(conversions) if conversions is not None else None,
                      "solve_idx": solve_idx, "unknown": unknown, "T_out": T_out, "Q": Q, "Q_loss": Q_loss,
                      "reactions": reactions}
    result["_comps"] = comps
    result["effluent_temperature_k"] = T_out
    result["duty_w"] = Q
    result["heat_loss_w"] = Q_loss
    result["effluent_flow_mol_s"] = F_out
    result["effluent_mass_flow_kg_s"] = sum(v * comps[k].molar_mass / 1000.0 for k, v in n_out.items())
    result["effluent_composition"] = {k: v / F_out for k, v in n_out.items()}
    result["feed_enthalpy_w"] = H_in
    result["effluent_enthalpy_w"] = H_out(n_out, T_out)
    result["effluent_heat_capacity_w_k"] = sum(v * Cp(k, T_out) for k, v in n_out.items())
    if reactions:
        i0 = solve_idx if solve_idx is not None else 0
        result["conversion"] = conversions[i0] if conversions else None
        result["reactions"] = []
        for nu, key, X, xi in zip(stoich, keys, conversions or [], xis):
            d298 = sum(v * H(k, T0) for k, v in nu.items()) / (-nu[key])
            dout = sum(v * H(k, T_out) for k, v in nu.items()) / (-nu[key])
            result["reactions"].append({"key": key, "conversion": X, "extent_mol_s": xi,
                                        "heat_of_reaction_298_j_mol": d298,
                                        "heat_of_reaction_outlet_j_mol": dout})
    else:
        result["conversion"] = None

    # element balance where every component has a formula
    if all(c.formula for c in comps.values()):
        eb = {}
        for k, c in comps.items():
            for el, a in parse_formula(c.formula).items():
                e = eb.setdefault(el, [0.0, 0.0])
                e[0] += a * n_in[k]
                e[1] += a * n_out[k]
        result["element_balance"] = eb

    if "pressure" in model:
        P = conv(model["pressure"], "pressure")[0]
        result["pressure_pa"] = P
        xo = {k: v / F_out for k, v in n_out.items() if v > 0}
        tb = bubble_point(comps, xo, P) if all(comps[k].has_psat() for k in xo) else None
        result["bubble_point_k"] = tb
        if tb is not None:
            result["bubble_margin_k"] = tb - T_out
    return result


def bubble_point(comps, x, P):
    f = lambda T: math.log(sum(v * comps[k].psat_at(T) for k, v in x.items())) - math.log(P)
    # scan for a sign change on [100, 1000] K
    grid = [100.0 + 5.0 * i for i in range(181)]
    prev = None
    for T in grid:
        try:
            v = f(T)
        except (OverflowError, ValueError):
            prev = None
            continue
        if prev is not None and prev[1] < 0 <= v:
            return brentq(f, prev[0], T, xtol=1e-13, rtol=4 * 2.220446049250313e-16, maxiter=500)
        prev = (T, v)
    return None


# ----------------------------------------------------------------------------------------------
# Uncertainty propagation (GUM, JCGM 100:2008, eq. 10: first order, inputs uncorrelated)
# ----------------------------------------------------------------------------------------------
# The balance is written as the needed-duty residual
#     f(y, x) = Qn(x, T_out, X) - Q,    Qn = H_out(T_out) - H_in + Q_loss,
# and the unknown y (T_out, Q or the key conversion X_s) has dy/dx = -(df/dx)/(df/dy) with
#     df/dT_out = sum_k n_out,k Cp_k(T_out),  df/dQ = -1,
#     df/dX_s = (n_in,key/(-nu_key)) sum_i nu_i H_i(T_out).
# Every partial derivative below is analytic, except the derivative of the composition -> molar-flow
# map, which is taken by complex step (Squire and Trapp 1998: exact to rounding, no subtraction).

CSTEP = 1e-20

# mutation hooks for the self-test (xcheck.py --self-test); the defaults are the documented conventions
UNC_OPTS = {"rescale_others": True, "relative_flow_in_mol_s": False, "scalar_comp_on_all": False,
            "mass_flow_sensitivity_per_mol": False}


def temperature_difference(v):
    """A temperature *difference* (uncertainties, margins): degC = K, degF = degR = 5/9 K."""
    if not isinstance(v, str):
        return float(v)
    num, unit = split_unit(v)
    return num * UNITS["temperature"][unit][0]


def _relative(v):
    if isinstance(v, str):
        m = re.fullmatch(r"\s*([-+0-9.eE]+)\s*%\s*", v)
        if m:
            return float(m.group(1)) / 100.0
    return None


def _abs_or_rel(v, value, quantity):
    r = _relative(v)
    if r is not None:
        return r * abs(value)
    return conv(v, quantity)[0]


def _direction(w, i):
    """Perturbation direction in fraction space: x_i moves by +1, the other fractions are rescaled
    proportionally so that the sum is unchanged."""
    d = {k: 0.0 for k in w}
    d[i] = 1.0
    others = sum(v for k, v in w.items() if k != i)
    if UNC_OPTS["rescale_others"] and others > 0.0:
        for k, v in w.items():
            if k != i:
                d[k] = -v / others
    return d


def _mole_fractions(w, basis, comps):
    """given-basis fractions (may be complex) -> mole fractions, normalised."""
    if basis == "mass":
        y = {k: v / comps[k].molar_mass for k, v in w.items()}
    else:
        y = dict(w)
    s = sum(y.values())
    return {k: v / s for k, v in y.items()}


def _cstep(fun, w, d):
    """directional derivative of fun (dict -> dict or scalar) at w along d, by complex step."""
    wc = {k: complex(v, CSTEP * d[k]) for k, v in w.items()}
    r = fun(wc)
    if isinstance(r, dict):
        return {k: v.imag / CSTEP for k, v in r.items()}
    return r.imag / CSTEP


def uncertainty(case: dict, res: dict):
    """The uncertainty budget of a result of calc(); None when no input uncertainty is given.
    Returns {quantity, standard_uncertainty, dominant_input, contributions: [...]} with the labels
    efftemp uses: '<feed> flow|temperature', '<feed> <id as written> fraction', 'reaction N conversion',
    'effluent temperature', 'effluent <id as written> fraction', 'heater duty', 'heat loss'
    (<feed> = the feed's name, else 'feed N')."""
    c = res["_ctx"]
    H, Cp, comps = c["H"], c["Cp"], c["comps"]
    unknown, T_out = c["unknown"], c["T_out"]
    n_out, n_in = c["n_out"], c["n_in"]
    M = {k: comps[k].molar_mass / 1000.0 for k in comps}      # kg/mol
    Hout = {k: H(k, T_out) for k in comps}
    Cp_out = sum(v * Cp(k, T_out) for k, v in n_out.items())
    stoich, keys, X = c["stoich"], c["keys"], c["conversions"]
    eff = c["eff"]

    # g_k = dH_out/dn_in,k at fixed T_out and fixed conversions
    if eff is not None:
        x_out = _mole_fractions(eff["w"], eff["basis"], comps)
        h_mass = sum(x_out[k] * Hout[k] for k in x_out) / sum(x_out[k] * M[k] for k in x_out)   # J/kg
        g = {k: M[k] * h_mass for k in comps}
    else:
        g = dict(Hout)
        for nu, key, Xr in zip(stoich, keys, X or []):
            dH = sum(v * Hout[k] for k, v in nu.items())
            g[key] += Xr / (-nu[key]) * dH

    def dQn_dX(r):
        nu, key = stoich[r], keys[r]
        return n_in[key] / (-nu[key]) * sum(v * Hout[k] for k, v in nu.items())

    # df/dy
    if unknown == "temperature":
        dfdy, quantity = Cp_out, "effluent_temperature_k"
    elif unknown == "duty":
        dfdy, quantity = -1.0, "duty_w"
    else:
        dfdy, quantity = dQn_dX(c["solve_idx"]), "conversion"

    items = []   # (label, value, u, df/dx)

    def coef_fun(fc):
        basis, mass_flow = fc["basis"], fc["flow_quantity"] == "mass_flow"
        def fun(w):
            x = _mole_fractions(w, basis, comps)
            if mass_flow:
                mbar = sum(x[k] * M[k] for k in x)
                return {k: v / mbar for k, v in x.items()}
            return x
        return fun

    for fc in c["feeds"]:
        f = fc["raw"]
        label = f.get("name") or f"feed {fc['index'] + 1}"
        Tf = fc["T"]
        fun = coef_fun(fc)
        a = {k: v.real for k, v in fun({k: complex(v) for k, v in fc["w"].items()}).items()}
        n_j = {k: fc["flow_mol_s"] * _mole_fractions(fc["w"], fc["basis"], comps)[k] for k in fc["w"]}
        if "flow_uncertainty" in f:
            v = f["flow_uncertainty"]
            q = fc["flow_quantity"]
            rel = _relative(v)
            if rel is not None:
                u = rel * abs(fc["flow_given"])
                if UNC_OPTS["relative_flow_in_mol_s"] and q == "mass_flow":
                    u = rel * fc["flow_mol_s"]
            else:
                u = conv(v, q)[0]
            dfdx = sum(a[k] * (g[k] - H(k, Tf)) for k in a)
            value = fc["flow_given"]
            if UNC_OPTS["mass_flow_sensitivity_per_mol"] and q == "mass_flow":
                k_ = fc["flow_mol_s"] / fc["flow_given"]          # mol per kg
                value, u, dfdx = fc["flow_mol_s"], u * k_, dfdx / k_
            items.append((f"{label} flow", value, u, dfdx, ("feed", fc["index"], "flow")))
        if "temperature_uncertainty" in f:
            u = temperature_difference(f["temperature_uncertainty"])
            dfdx = -sum(v * Cp(k, Tf) for k, v in n_j.items())
            items.append((f"{label} temperature", Tf, u, dfdx, ("feed", fc["index"], "temperature")))
        if "composition_uncertainty" in f:
            cu = f["composition_uncertainty"]
            if isinstance(cu, dict):
                sel = [(norm_id(k), float(v)) for k, v in cu.items()]
            else:
                sel = [(k, float(cu)) for k, v in fc["w"].items()
                       if UNC_OPTS["scalar_comp_on_all"] or 0.0 < v < 1.0]
            for k, u in sel:
                da = _cstep(fun, fc["w"], _direction(fc["w"], k))
                dfdx = fc["flow_given"] * sum(da[j] * (g[j] - H(j, Tf)) for j in da)
                items.append((f"{label} {c['display'][k]} fraction", fc["w"][k], u, dfdx,
                              ("feed", fc["index"], "fraction", k)))

    for r, rx in enumerate(c["reactions"]):
        if "conversion_uncertainty" in rx and r != c["solve_idx"]:
            v = rx["conversion_uncertainty"]
            rel = _relative(v)
            u = rel * abs(X[r]) if rel is not None else float(v)
            items.append((f"reaction {r + 1} conversion", X[r], u, dQn_dX(r), ("reaction", r)))

    effl = case.get("effluent", {})
    if "temperature_uncertainty" in effl and unknown != "temperature":
        items.append(("effluent temperature", T_out, temperature_difference(effl["temperature_uncertainty"]),
                      Cp_out, ("effluent", "temperature")))
    if eff is not None and "composition_uncertainty" in effl:
        cu = effl["composition_uncertainty"]
        if isinstance(cu, dict):
            sel = [(norm_id(k), float(v)) for k, v in cu.items()]
        else:
            sel = [(k, float(cu)) for k, v in eff["w"].items() if UNC_OPTS["scalar_comp_on_all"] or 0.0 < v < 1.0]

        def hmass(w):
            x = _mole_fractions(w, eff["basis"], comps)
            return sum(x[k] * Hout[k] for k in x) / sum(x[k] * M[k] for k in x)
        for k, u in sel:
            dfdx = c["m_in"] * _cstep(hmass, eff["w"], _direction(eff["w"], k))
            items.append((f"effluent {c['display'][k]} fraction", eff["w"][k], u, dfdx, ("effluent", "fraction", k)))

    heater = case.get("heater", {})
    if "duty_uncertainty" in heater and unknown != "duty":
        Q = c["Q"]
        items.append(("heater duty", Q, _abs_or_rel(heater["duty_uncertainty"], Q, "heat_flow"), -1.0, ("heater", "duty")))
    if "heat_loss_uncertainty" in heater:
        QL = c["Q_loss"]
        items.append(("heat loss", QL, _abs_or_rel(heater["heat_loss_uncertainty"], QL, "heat_flow"), 1.0,
                      ("heater", "heat_loss")))

    if not items:
        return None
    contribs = []
    for label, value, u, dfdx, where in items:
        s = -dfdx / dfdy
        contribs.append({"input": label, "value": value, "standard_uncertainty": u, "sensitivity": s,
                         "contribution": abs(s) * u, "_where": where})
    tot2 = sum(cc["contribution"] ** 2 for cc in contribs)
    for cc in contribs:
        cc["share"] = cc["contribution"] ** 2 / tot2 if tot2 > 0 else 0.0
    dom = max(contribs, key=lambda cc: cc["contribution"])["input"] if tot2 > 0 else None
    return {"quantity": quantity, "standard_uncertainty": math.sqrt(tot2), "dominant_input": dom,
            "contributions": contribs}
