"""An independent nodal model of the stage, written from DESIGN.md §2, §3a and §7.

Oracle for the supply, stage-feature, noise and loop tests. Nothing here uses
freqpair's devices, bias, stamps, tails or stage code: the small-signal values
come from the DESIGN.md formulas with k and q from scipy.constants (CODATA),
the operating point from the bias rules (§2, §3a, §7a–7c), the netlist from the
element and rail lists (§2, §3a, §7f), the noise sources from §7h. The network
is solved exactly by sympy: every value is the exact rational of its float, s =
jω with ω the exact rational of the float used, and the nodal equations are
solved over the Gaussian rationals (sympy's ``QQ_I`` domain), so the only
rounding in a comparison is freqpair's own.

Conventions (as in the design notes):
- an admittance ``y = g + s·c`` joins two nodes;
- a transconductance ``value·(v[cp] − v[cn])`` leaves node ``a`` and enters
  node ``b`` through the element (the device's g_m·v_be from collector to
  emitter; §7d; the second stage's current drawn from ``out`` into its rail);
- ``ground``, ``in1``, ``in2``, ``vpos`` and ``vneg`` are driven (ideal sources),
  every other node is an unknown;
- a noise source is a current between two nodes with a one-sided density,
  named as freqpair lists contributors (RL1, Rs2, Q1.rb, Q1 collector shot,
  M3 channel, tail.q1 base shot, RE1, tail.Rdeg, Rz, element.N or the element's name).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np
import scipy.constants as sc
from sympy import QQ, QQ_I
from sympy.polys.matrices import DomainMatrix

K_B = sc.k                   # CODATA
Q_E = sc.e
DRIVEN = ("ground", "in1", "in2", "vpos", "vneg")


def rat(x: float):
    f = Fraction(float(x))
    return QQ(f.numerator, f.denominator)


# ------------------------------------------------------------------ the netlist
@dataclass
class Netlist:
    admittances: list = field(default_factory=list)    # (a, b, g, c, name)
    transconductances: list = field(default_factory=list)   # (value, a, b, cp, cn)
    noise: list = field(default_factory=list)          # (name, a, b, white, flicker_corner)
    aliases: dict = field(default_factory=dict)        # node name → node it is

    def node(self, n):
        while n in self.aliases:
            n = self.aliases[n]
        return n

    def y(self, a, b, g=0.0, c=0.0, name=None):
        a, b = self.node(a), self.node(b)
        if a != b and (g or c):
            self.admittances.append((a, b, float(g), float(c), name))

    def gm(self, value, a, b, cp, cn):
        a, b, cp, cn = map(self.node, (a, b, cp, cn))
        if value and a != b and cp != cn:
            self.transconductances.append((float(value), a, b, cp, cn))

    def resistor(self, a, b, r, name, temperature, noisy=True):
        """A physical resistor: its conductance and a 4kT/R current across it."""
        self.y(a, b, g=1.0 / r, name=name)
        if noisy and self.node(a) != self.node(b):
            self.noise.append((name, self.node(a), self.node(b),
                               4 * K_B * temperature / r, 0.0))

    def unknowns(self):
        seen = []
        for a, b, *_ in self.admittances:
            for n in (a, b):
                if n not in DRIVEN and n not in seen:
                    seen.append(n)
        for _, a, b, cp, cn in self.transconductances:
            for n in (a, b, cp, cn):
                if n not in DRIVEN and n not in seen:
                    seen.append(n)
        return seen


# ------------------------------------------------------------------ device values (§2)
def vt(design):
    return K_B * design.bias.temperature / Q_E


def bipolar_values(dev, ic, vcb, v_t):
    """Hybrid-pi values of one bipolar device at collector current ic and V_CB (§2)."""
    gm = ic / v_t
    cmu = dev.cjc0 / (1 + vcb / dev.phi_c) ** dev.m_c
    if dev.ft is not None:
        cpi = gm / (2 * math.pi * dev.ft) - cmu
    else:
        cpi = dev.cje + (dev.transit_time or 0.0) * gm
    return dict(kind="bjt", gm=gm, rpi=dev.beta / gm, ro=dev.early_voltage / ic, cpi=cpi,
                cmu=cmu, ccs=dev.ccs, rb=dev.base_resistance, ic=ic, ib=ic / dev.beta,
                fc=dev.flicker_corner)


def mos_values(dev, i_d, vsb):
    """Square-law values of one MOS device at drain current i_d and V_SB (§2, §7b)."""
    kp = dev.mobility_cox * dev.width / dev.length
    gm = math.sqrt(2 * kp * i_d)
    vov = math.sqrt(2 * i_d / kp)
    gmb = gm * dev.body_effect / (2 * math.sqrt(dev.surface_potential + vsb))
    return dict(kind="mos", gm=gm, gmb=gmb, vov=vov, vgs=dev.threshold + vov,
                ro=math.inf if dev.lambda_ == 0 else 1 / (dev.lambda_ * i_d),
                cgs=2 / 3 * dev.width * dev.length * dev.cox + dev.width * dev.overlap_cap,
                cgd=dev.width * dev.overlap_cap, cdb=dev.cdb, csb=dev.csb,
                gamma=dev.noise_gamma, fc=dev.flicker_corner, vsb=vsb)


def vgs_of(dev, i_d):
    kp = dev.mobility_cox * dev.width / dev.length
    return dev.threshold + math.sqrt(2 * i_d / kp)


# ------------------------------------------------------------------ device stamps
def stamp_device(net, label, dev_type, v, base, coll, emit, temperature, gm_factor=1.0):
    """One device: terminals base (external, before r_b), collector/drain, emitter/source."""
    if v["kind"] == "bjt":
        xb = base
        if v["rb"] > 0:
            xb = f"{label}.bi"
            net.resistor(base, xb, v["rb"], f"{label}.rb", temperature)
        net.y(xb, emit, g=1 / v["rpi"], c=v["cpi"])
        net.y(xb, coll, c=v["cmu"])
        net.y(coll, emit, g=1 / v["ro"])
        net.gm(v["gm"] * gm_factor, coll, emit, xb, emit)
        net.y(coll, "vneg", c=v["ccs"])             # substrate: vneg for npn and pnp (§7f)
        net.noise.append((f"{label} collector shot", net.node(coll), net.node(emit),
                          2 * Q_E * v["ic"], 0.0))
        net.noise.append((f"{label} base shot", net.node(xb), net.node(emit),
                          2 * Q_E * v["ib"], v["fc"]))
        return
    body = "vneg" if dev_type == "nmos" else "vpos"   # body rail (§7f)
    net.y(base, emit, c=v["cgs"])
    net.y(base, coll, c=v["cgd"])
    if math.isfinite(v["ro"]):
        net.y(coll, emit, g=1 / v["ro"])
    net.gm(v["gm"] * gm_factor, coll, emit, base, emit)
    net.gm(v["gmb"] * gm_factor, coll, emit, body, emit)   # g_mb·v_bs, drain → source
    net.y(emit, body, c=v["csb"])
    net.y(coll, body, c=v["cdb"])
    net.noise.append((f"{label} channel", net.node(coll), net.node(emit),
                      4 * K_B * temperature * v["gamma"] * v["gm"] * gm_factor, v["fc"]))


# ------------------------------------------------------------------ the stage
@dataclass
class Oracle:
    net: Netlist
    primary: str            # "balanced" | "o2" | "out"
    se_node: str            # single-ended output (o2 or out)
    bias: dict              # node voltages and device values, for hand checks


def build(design) -> Oracle:
    """The stage's netlist from DESIGN.md alone."""
    d, p = design, design.pair
    T, v_t = d.bias.temperature, vt(design)
    npn_like = p.type in ("npn", "nmos")
    load_rail, tail_rail = ("vpos", "vneg") if npn_like else ("vneg", "vpos")
    sgn = 1.0 if npn_like else -1.0            # +1: voltages as for npn/nmos
    v_load_rail = d.supply.positive if npn_like else d.supply.negative
    v_tail_rail = d.supply.negative if npn_like else d.supply.positive
    i_tail, vcm = d.bias.tail_current, d.bias.input_common_mode
    net = Netlist()
    info = {}
    bip = p.type in ("npn", "pnp")

    # ---- operating point of the pair (§2, §7a, §7c)
    if bip:
        ic = p.beta / (p.beta + 1) * i_tail / 2
        ie = i_tail / 2
        v_e = vcm - sgn * p.vbe
    else:
        ic = ie = i_tail / 2
        v_e = vcm - sgn * vgs_of(p, ic)
    v_tail_node = v_e - sgn * ie * p.degeneration
    if d.load.type == "resistor":
        v_o = v_load_rail - sgn * ic * d.load.resistance
    else:
        m = d.load.device
        v_o = v_load_rail - sgn * (m.vbe if m.type in ("npn", "pnp") else vgs_of(m, ic))
    casc = p.cascode
    if casc is not None:
        v_c = casc.bias - sgn * (casc.vbe if bip else vgs_of(casc, ic))
    else:
        v_c = v_o
    info.update(ic=ic, v_e=v_e, v_t=v_tail_node, v_o=v_o, v_c=v_c)

    # ---- inputs, r_s
    rs = d.source.resistance
    for k in (1, 2):
        if rs > 0:
            net.resistor(f"in{k}", f"b{k}", rs, f"Rs{k}", T)
        else:
            net.aliases[f"b{k}"] = f"in{k}"

    # ---- pair devices (and cascodes)
    for k, h in ((1, 0.5), (2, -0.5)):
        gm_f = 1 + h * d.mismatch.gm
        emit = f"e{k}" if p.degeneration > 0 else "t"
        coll = f"c{k}" if casc is not None else f"o{k}"
        if p.degeneration > 0:
            net.resistor(f"e{k}", "t", p.degeneration, f"RE{k}", T)
        if bip:
            vcb = sgn * (v_c - vcm)
            v = bipolar_values(p, ic, vcb, v_t)
        else:
            vsb = abs(v_e - (d.supply.negative if p.type == "nmos" else d.supply.positive))
            v = mos_values(p, ic, vsb)
        info[f"pair{k}"] = v
        stamp_device(net, f"Q{k}", p.type, v, f"b{k}", coll, emit, T, gm_f)
        if casc is not None:
            if bip:
                vc = bipolar_values(casc, ic, sgn * (v_o - casc.bias), v_t)
            else:
                vsb = abs(v_c - (d.supply.negative if p.type == "nmos" else d.supply.positive))
                vc = mos_values(casc, ic, vsb)
            info[f"casc{k}"] = vc
            stamp_device(net, f"QC{k}", p.type, vc, "ground", f"o{k}", f"c{k}", T)

    # ---- load
    if d.load.type == "resistor":
        for k, h in ((1, 0.5), (2, -0.5)):
            net.resistor(f"o{k}", load_rail, d.load.resistance * (1 + h * d.mismatch.load),
                         f"RL{k}", T)
            net.y(f"o{k}", "ground", c=d.load.capacitance)
    else:
        m = d.load.device
        if m.type in ("npn", "pnp"):
            vm = bipolar_values(m, ic, 0.0, v_t)
        else:
            vm = mos_values(m, ic, 0.0)
        info["mirror"] = vm
        stamp_device(net, "M3", m.type, vm, "o1", "o1", load_rail, T, 1 + d.mismatch.load / 2)
        stamp_device(net, "M4", m.type, vm, "o1", "o2", load_rail, T, 1 - d.mismatch.load / 2)
        net.y("o2", "ground", c=d.load.capacitance)

    # ---- tail
    tail = d.tail
    if tail.type == "norton":
        net.resistor("t", tail_rail, tail.resistance, "Rtail", T)
        net.y("t", tail_rail, c=tail.capacitance)
    elif tail.type != "ideal":
        q = tail.device
        tb = q.type in ("npn", "pnp")
        v_rail_dist = sgn * (v_tail_node - v_tail_rail)       # tail node above its rail
        if tail.type in ("mirror", "degenerated"):
            r_deg = tail.degeneration if tail.type == "degenerated" else 0.0
            emit = "te" if r_deg > 0 else tail_rail
            if r_deg > 0:
                net.resistor("te", tail_rail, r_deg, "tail.Rdeg", T)
            if tb:
                vq = bipolar_values(q, i_tail, v_rail_dist - i_tail * r_deg - q.vbe, v_t)
            else:
                vq = mos_values(q, i_tail, i_tail * r_deg)
            info["tail"] = vq
            stamp_device(net, "tail.q1", q.type, vq, tail_rail, "t", emit, T)
        else:                                                    # cascode
            if tb:
                lo = bipolar_values(q, i_tail, 0.0, v_t)
                up = bipolar_values(q, i_tail, v_rail_dist - 2 * q.vbe, v_t)
            else:
                lo = mos_values(q, i_tail, 0.0)
                up = mos_values(q, i_tail, vgs_of(q, i_tail))
            info["tail_lo"], info["tail_up"] = lo, up
            stamp_device(net, "tail.q1", q.type, lo, tail_rail, "tx", tail_rail, T)
            stamp_device(net, "tail.q2", q.type, up, tail_rail, "t", "tx", T)
        net.y("t", tail_rail, c=tail.extra_capacitance)

    # ---- second stage (§3a, §7f)
    ss = d.second_stage
    if ss is not None:
        net.gm(ss.gm, "out", load_rail, "o2", load_rail)
        net.y("o2", load_rail, c=ss.input_capacitance)
        net.y("out", load_rail, g=1 / ss.output_resistance)
        net.y("out", "ground", c=ss.load_capacitance)
        if ss.miller_capacitance > 0:
            if ss.nulling_resistance > 0:
                net.resistor("o2", "mz", ss.nulling_resistance, "Rz", T)
                net.y("mz", "out", c=ss.miller_capacitance)
            else:
                net.y("o2", "out", c=ss.miller_capacitance)

    # ---- added elements (§7d)
    for i, el in enumerate(d.element):
        a, b = el.nodes
        name = el.name or f"element.{i}"
        if el.kind == "resistor":
            net.resistor(a, b, el.value, name, T)
        elif el.kind == "capacitor":
            net.y(a, b, c=el.value)
        else:
            net.gm(el.value, a, b, *el.control)

    if ss is not None:
        primary, se = "out", "out"
    elif d.load.type == "resistor":
        primary, se = "balanced", "o2"
    else:
        primary, se = "o2", "o2"
    return Oracle(net, primary, se, info)


# ------------------------------------------------------------------ exact solution
def _system(net: Netlist, omega: float):
    """(Y over the unknowns, the columns of the driven nodes, names) at s = j·omega, exact."""
    names = net.unknowns()
    idx = {n: i for i, n in enumerate(names)}
    n = len(names)
    w = rat(omega)
    Y = [[QQ_I(0, 0) for _ in range(n)] for _ in range(n)]
    D = {src: [QQ_I(0, 0) for _ in range(n)] for src in DRIVEN}

    def add(row, col, val):
        if row not in idx:
            return
        if col in idx:
            Y[idx[row]][idx[col]] += val
        else:
            D[col][idx[row]] += val

    for a, b, g, c, _ in net.admittances:
        y = QQ_I(rat(g), rat(c) * w)
        add(a, a, y), add(b, b, y), add(a, b, -y), add(b, a, -y)
    for val, a, b, cp, cn in net.transconductances:
        g = QQ_I(rat(val), 0)
        add(a, cp, g), add(a, cn, -g), add(b, cp, -g), add(b, cn, g)
    return Y, D, names


def solve(net: Netlist, omega: float, drives: dict, injections=()):
    """Node voltages for each drive ({name: {driven node: value}}) and each injection
    (a unit current drawn out of node a and pushed into node b), at s = j·omega.

    Returns {column name: {node: complex}} with driven nodes included.
    """
    Y, D, names = _system(net, omega)
    n = len(names)
    idx = {nm: i for i, nm in enumerate(names)}
    cols, labels = [], []
    for label, drive in drives.items():
        col = [QQ_I(0, 0)] * n
        for src, val in drive.items():
            if src == "ground":
                continue
            col = [c - D[src][i] * QQ_I(rat(val), 0) for i, c in enumerate(col)]
        cols.append(col)
        labels.append(label)
    for label, (a, b) in injections:
        col = [QQ_I(0, 0)] * n
        if a in idx:
            col[idx[a]] -= QQ_I(1, 0)
        if b in idx:
            col[idx[b]] += QQ_I(1, 0)
        cols.append(col)
        labels.append(label)
    A = DomainMatrix(Y, (n, n), QQ_I)
    B = DomainMatrix([[cols[j][i] for j in range(len(cols))] for i in range(n)],
                     (n, len(cols)), QQ_I)
    X = A.lu_solve(B).to_list()
    out = {}
    for j, label in enumerate(labels):
        drive = drives.get(label, {})
        volts = {src: complex(drive.get(src, 0.0)) if label in drives else 0j
                 for src in DRIVEN}
        for i, nm in enumerate(names):
            z = X[i][j]
            volts[nm] = complex(float(z.x), float(z.y))
        out[label] = volts
    return out


DRIVES = {
    "dm": {"in1": 0.5, "in2": -0.5},
    "cm": {"in1": 1.0, "in2": 1.0},
    "vpos": {"vpos": 1.0},
    "vneg": {"vneg": 1.0},
}


def _current_leaving(net: Netlist, node: str, volts: dict, omega: float, skip=()):
    """Current leaving `node` into every element at it (except those named in skip)."""
    node = net.node(node)
    s = 1j * omega
    i = 0j
    for a, b, g, c, name in net.admittances:
        if name in skip:
            continue
        if a == node:
            i += (g + s * c) * (volts[a] - volts[b])
        elif b == node:
            i += (g + s * c) * (volts[b] - volts[a])
    for val, a, b, cp, cn in net.transconductances:
        cur = val * (volts[cp] - volts[cn])
        if a == node:
            i += cur
        if b == node:
            i -= cur
    return i


def gains(oracle: Oracle, f_hz: float) -> dict:
    """Every named gain of §2/§7f/§7g at one frequency (0 for DC), from the exact solve."""
    net = oracle.net
    omega = 2 * math.pi * f_hz
    sol = solve(net, omega, DRIVES)
    dm, cm = sol["dm"], sol["cm"]
    v = lambda drive, name: drive[net.node(name)]       # noqa: E731
    se = oracle.se_node
    out = dict(adm=v(dm, "o1") - v(dm, "o2"), adm_se=v(dm, "o2"), acm_se=v(cm, "o2"),
               acm_dm=v(cm, "o1") - v(cm, "o2"),
               acm_cm=(v(cm, "o1") + v(cm, "o2")) / 2,
               a_vpos=v(sol["vpos"], se), a_vneg=v(sol["vneg"], se))
    if se == "out":
        out["a_total"] = v(dm, "out")
        out["acm_total"] = v(cm, "out")
    skip = ("Rs1", "Rs2")
    i1_dm = _current_leaving(net, "b1", dm, omega, skip)
    i1_cm = _current_leaving(net, "b1", cm, omega, skip)
    i2_cm = _current_leaving(net, "b2", cm, omega, skip)
    out["zin_dm"] = (v(dm, "b1") - v(dm, "b2")) / i1_dm if i1_dm != 0 else complex(math.inf)
    i_cm = i1_cm + i2_cm
    out["zin_cm"] = ((v(cm, "b1") + v(cm, "b2")) / 2) / i_cm if i_cm != 0 \
        else complex(math.inf)
    out["primary"] = {"balanced": out["adm"], "o2": out["adm_se"],
                      "out": out.get("a_total")}[oracle.primary]
    out["a_se"] = out["a_total"] if se == "out" else out["adm_se"]
    return out


def output_of(oracle: Oracle, volts: dict) -> complex:
    net = oracle.net
    if oracle.primary == "balanced":
        return volts[net.node("o1")] - volts[net.node("o2")]
    return volts[net.node(oracle.se_node)]


def noise(oracle: Oracle, f_hz: float) -> dict:
    """Each source's part of S_out [V²/Hz] by injecting it alone (direct solve), §7h."""
    net = oracle.net
    omega = 2 * math.pi * f_hz
    inj = [(i, (a, b)) for i, (_, a, b, _, _) in enumerate(net.noise)]
    sol = solve(net, omega, {"dm": DRIVES["dm"]}, injections=inj)
    parts = {}
    for i, (name, a, b, white, fc) in enumerate(net.noise):
        h = output_of(oracle, sol[i])
        parts[name] = abs(h) ** 2 * white * (1 + fc / f_hz)
    a_primary = output_of(oracle, sol["dm"])
    return dict(parts=parts, total=sum(parts.values()), gain=a_primary)


def gain_array(oracle, freqs, key):
    return np.array([gains(oracle, f)[key] for f in freqs])


# ------------------------------------------------------------------ crossings
def lowest_crossing(grid_hz, values_on_grid, func, level):
    """Lowest frequency where func(f) (oracle) reaches `level`.

    The first sign change of values_on_grid − level (any curve close enough to
    bracket the root, e.g. freqpair's own on a fine grid) brackets it; the root
    itself is found on `func` by Brent's method in log f (scipy.optimize.brentq).
    Returns None when the curve never reaches the level on the grid.
    """
    from scipy.optimize import brentq
    d = np.asarray(values_on_grid, dtype=float) - level
    idx = np.nonzero(np.sign(d[1:]) != np.sign(d[:-1]))[0]
    if not len(idx):
        return None
    i = idx[0]
    lo, hi = math.log(grid_hz[i]), math.log(grid_hz[i + 1])
    g = lambda u: func(math.exp(u)) - level          # noqa: E731
    if g(lo) * g(hi) > 0:                            # bracket from the grid, check it
        raise AssertionError("oracle does not bracket the grid's crossing")
    return math.exp(brentq(g, lo, hi, xtol=1e-13, rtol=1e-14))


# ------------------------------------------------------------------ tolerances
def rail_rtol(a_se, a_rail):
    # A rail gain far below A_se is a small difference of node voltages of order
    # |A_se|: float64 rounding shows in it magnified by |A_se/A_rail| (as A_cm-dm
    # against the CMRR, DEVELOPERS.md). 1e-9 holds below a ratio of ≈ 100 dB;
    # measured here ≤ 1.2e-9 at 123 dB.
    return max(1e-9, 1e-14 * abs(a_se) / abs(a_rail))


def assert_admittance(z_fp, z_ref, gm, msg):
    # Z_in compared as the admittance 1/Z: a MOS gate's input current at low
    # frequency is ~1e-12 of the device currents, so its rounding floor is an
    # absolute one, ≈ 1e-16·g_m (measured ≤ 3.3e-19 S); 1e-14·g_m is allowed.
    y_fp = 0 if math.isinf(abs(z_fp)) else 1 / z_fp
    y_ref = 0 if math.isinf(abs(z_ref)) else 1 / z_ref
    assert abs(y_fp - y_ref) <= 1e-9 * abs(y_ref) + 1e-14 * gm, \
        f"{msg}: Z_in {z_fp} vs {z_ref}"
