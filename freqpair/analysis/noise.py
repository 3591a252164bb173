"""Noise: output and input-referred densities, who contributes, rms over a band (DESIGN.md §7h).

Every noise source of the stage (:mod:`freqpair.circuit.noise_sources`) is a
current between two nodes; its contribution to the output density is
|Z_k(f)|²·S_k(f), Z_k the transimpedance from that current to the primary
output. All Z_k at one frequency come from one transposed solve of the
network (:meth:`~freqpair.circuit.network.FrequencySolver.adjoint`), not one
solve per source. The sources are uncorrelated, so the powers add.

- Output: the stage's primary output — v_od with a resistor load and no
  second stage, else v_o2 (mirror load) or v_out (second stage).
- Input-referred density e_n(f) = √S_out(f)/|A(f)|, A the primary gain.
- rms over a band: √∫S df, integrated adaptively (Simpson's rule in ln f,
  the grid doubled until two results agree to 1e-5) — well within the 0.5 %
  asked.
- Noise figure NF = 10·log10(S_out/S_out,Rs), S_out,Rs the part from the two
  source resistors (undefined, None, when R_s = 0).

An ideal tail and the second stage's transconductor are noiseless (an
idealisation), as are the model resistances r_pi, r_o and R_out2.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from freqpair.analysis.responses import StageResponses
from freqpair.circuit.frequency import s_of_hz

__all__ = ["NoiseSpot", "NoiseResult", "NoiseCurves", "noise_curves", "noise_analysis",
           "integrate_density", "optimum_source_resistance", "SOURCE_RESISTORS",
           "NOISE_CAUTION"]

#: Names of the source resistors (for the noise figure).
SOURCE_RESISTORS = ("Rs1", "Rs2")

NOISE_CAUTION = ("Noise model — resistors 4kT/R, bipolar shot noise 2qI_C and 2qI_B (the "
                 "base term with its 1/f corner), MOS channel noise 4kTγ_n·g_m (with its 1/f "
                 "corner); an ideal tail and the second stage's transconductor are taken as "
                 "noiseless.")


@dataclass(frozen=True)
class NoiseCurves:
    """Noise densities on a frequency grid.

    Attributes
    ----------
    f_hz : ndarray
        Frequencies [Hz].
    output_v2_hz : ndarray
        Output density S_out [V²/Hz].
    input_v2_hz : ndarray
        Input-referred density e_n² [V²/Hz] (inf where the gain is zero).
    gain : ndarray of complex
        The primary gain A(f) [V/V].
    names : tuple of str
        The sources, in the stage's order.
    contributions_v2_hz : ndarray, shape (n_f, n_sources)
        Each source's part of S_out [V²/Hz].
    """

    f_hz: np.ndarray
    output_v2_hz: np.ndarray
    input_v2_hz: np.ndarray
    gain: np.ndarray
    names: tuple
    contributions_v2_hz: np.ndarray
    white_fraction: np.ndarray | None = None

    def white_output_v2_hz(self) -> np.ndarray:
        """S_out with every source's 1/f part removed [V²/Hz]."""
        if self.white_fraction is None:
            return self.output_v2_hz
        return (self.contributions_v2_hz * self.white_fraction).sum(axis=1)

    @property
    def input_v_rthz(self) -> np.ndarray:
        """e_n [V/√Hz]."""
        return np.sqrt(self.input_v2_hz)

    @property
    def output_v_rthz(self) -> np.ndarray:
        """√S_out [V/√Hz]."""
        return np.sqrt(self.output_v2_hz)

    def shares(self) -> np.ndarray:
        """Each source's fraction of S_out (rows sum to 1; 0 where S_out = 0)."""
        tot = self.output_v2_hz[:, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(tot > 0, self.contributions_v2_hz / tot, 0.0)

    def source_resistor_v2_hz(self) -> np.ndarray | None:
        """The two source resistors' part of S_out [V²/Hz], None without R_s."""
        idx = [i for i, n in enumerate(self.names) if n in SOURCE_RESISTORS]
        if not idx:
            return None
        return self.contributions_v2_hz[:, idx].sum(axis=1)


@dataclass(frozen=True)
class NoiseSpot:
    """Noise at one frequency.

    Attributes
    ----------
    f_hz : float
    input_v_rthz, output_v_rthz : float
        e_n and √S_out [V/√Hz].
    nf_db : float or None
        Noise figure [dB] for the design's R_s (None when R_s = 0).
    contributors : list of (str, float)
        (source name, share of S_out), largest first; shares sum to 1.
    """

    f_hz: float
    input_v_rthz: float
    output_v_rthz: float
    nf_db: float | None
    contributors: list = field(default_factory=list)

    def to_json(self) -> dict:
        fin = (lambda v: None if v is None or not math.isfinite(v) else float(v))
        return {"f_hz": float(self.f_hz), "input_v_rthz": fin(self.input_v_rthz),
                "output_v_rthz": fin(self.output_v_rthz), "nf_db": fin(self.nf_db),
                "contributors": [{"name": n, "share": float(s)} for n, s in self.contributors]}


@dataclass(frozen=True)
class NoiseResult:
    """Spot noise, band rms values and the band (the JSON ``noise`` object)."""

    spots: tuple
    band_hz: tuple
    input_rms_v: float
    output_rms_v: float

    def to_json(self) -> dict:
        fin = (lambda v: None if v is None or not math.isfinite(v) else float(v))
        return {"spot": [s.to_json() for s in self.spots],
                "band_hz": [float(self.band_hz[0]), float(self.band_hz[1])],
                "input_rms_v": fin(self.input_rms_v), "output_rms_v": fin(self.output_rms_v)}


def _output_row(resp: StageResponses) -> np.ndarray:
    return resp.output_row(resp.primary)[0]


def noise_curves(resp: StageResponses, f_hz) -> NoiseCurves:
    """Output and input-referred noise densities and every source's part.

    Parameters
    ----------
    resp : StageResponses
    f_hz : array_like
        Frequencies [Hz], > 0.

    Returns
    -------
    NoiseCurves
    """
    f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    if np.any(f <= 0) or not np.all(np.isfinite(f)):
        raise ValueError("noise frequencies must be finite and > 0 Hz")
    stage = resp.stage
    net = stage.network
    index = {name: i for i, name in enumerate(net.node_names)}
    sources = stage.noise_sources
    s = s_of_hz(f)
    y = resp.solver.adjoint(s, _output_row(resp))                               # (n_f, n)
    zero = np.zeros(f.size, dtype=complex)
    contrib = np.empty((f.size, len(sources)))
    white = np.empty((f.size, len(sources)))
    for k, src in enumerate(sources):
        zb = y[:, index[src.b]] if src.b in index else zero
        za = y[:, index[src.a]] if src.a in index else zero
        dens = src.density(f)
        contrib[:, k] = np.abs(zb - za) ** 2 * dens
        with np.errstate(divide="ignore", invalid="ignore"):
            white[:, k] = np.where(dens > 0, src.white_a2_hz / dens, 1.0)
    total = contrib.sum(axis=1)
    # the same solve gives the primary gain: A = l·(G + sC)⁻¹·b = y·b
    _, kind = resp.output_row(resp.primary)
    a = y @ resp.excitation(kind)
    with np.errstate(divide="ignore", invalid="ignore"):
        en2 = np.where(np.abs(a) > 0, total / np.abs(a) ** 2, np.inf)
    return NoiseCurves(f, total, en2, a, tuple(src.name for src in sources), contrib, white)


def integrate_density(density, f_lo: float, f_hi: float, rtol: float = 1e-5,
                      start_per_decade: int = 16, max_per_decade: int = 8192) -> float:
    """∫ density(f) df from ``f_lo`` to ``f_hi`` [Hz], adaptively.

    Simpson's rule in u = ln f (the integrand density(f)·f), on a grid doubled
    until two successive results agree to ``rtol``.

    Parameters
    ----------
    density : callable
        Vectorised S(f) (≥ 0).
    f_lo, f_hi : float
        The band [Hz], 0 < f_lo < f_hi.

    Returns
    -------
    float
        The integral (units of S times Hz).
    """
    decades = math.log10(f_hi / f_lo)
    n = max(2, int(math.ceil(decades * start_per_decade)))
    n += n % 2
    prev = None
    while True:
        u = np.linspace(math.log(f_lo), math.log(f_hi), n + 1)
        f = np.exp(u)
        g = np.asarray(density(f), dtype=float) * f
        h = (u[-1] - u[0]) / n
        val = h / 3.0 * (g[0] + g[-1] + 4.0 * g[1:-1:2].sum() + 2.0 * g[2:-1:2].sum())
        if prev is not None and abs(val - prev) <= rtol * abs(val):
            return float(val)
        if n >= max(decades * max_per_decade, 256):
            return float(val)
        prev = val
        n *= 2


def _band_pieces(resp: StageResponses, lo: float, hi: float) -> list[float]:
    """The band's edges, split around every lightly damped pole of the network and
    zero of the primary gain (natural frequency f_0 inside the band, Q above 5):
    at f_0 and f_0 ± 1, 10, 100 … half-bandwidths |Re s|/2π (up to f_0/2). A
    resonance narrower than the integration grid's first steps is then sampled at
    its centre and its flanks resolved from the start, so the adaptive rule cannot
    step over it (over the whole band at once it missed 3 % at Q ≈ 3,000 and
    90 % at Q = 10⁶)."""
    solver = resp.solver
    l, kind = resp.output_row(resp.primary)
    roots = np.concatenate([solver.poles(), solver.zeros(resp.excitation(kind), l)])
    edges = {float(lo), float(hi)}
    for r in roots:
        w = abs(r)
        if not math.isfinite(w) or w == 0.0 or abs(r.real) >= 0.1 * w:
            continue
        f0, step = w / (2 * math.pi), abs(r.real) / (2 * math.pi)
        ladder = [f0]
        while 0 < step < 0.5 * f0:
            ladder += [f0 - step, f0 + step]
            step *= 10.0
        edges.update(float(x) for x in ladder if lo < x < hi)
    return sorted(edges)


def noise_analysis(resp: StageResponses, design) -> NoiseResult:
    """Spot values at ``[noise] spot_frequencies`` and rms values over ``[noise] band``.

    Parameters
    ----------
    resp : StageResponses
    design : Design
        For the ``[noise]`` table.

    Returns
    -------
    NoiseResult
    """
    spots_hz = tuple(design.noise.spot_frequencies)
    nc = noise_curves(resp, np.array(spots_hz))
    rs_part = nc.source_resistor_v2_hz()
    shares = nc.shares()
    spots = []
    for i, f in enumerate(spots_hz):
        nf = None
        if rs_part is not None and rs_part[i] > 0:
            nf = 10.0 * math.log10(nc.output_v2_hz[i] / rs_part[i])
        order = np.argsort(-shares[i], kind="stable")
        contributors = [(nc.names[k], float(shares[i, k])) for k in order if shares[i, k] > 0]
        spots.append(NoiseSpot(float(f), float(nc.input_v_rthz[i]), float(nc.output_v_rthz[i]),
                               nf, contributors))
    lo, hi = design.noise.band
    edges = _band_pieces(resp, lo, hi)
    pieces = list(zip(edges[:-1], edges[1:]))
    out_ms = sum(integrate_density(lambda f: noise_curves(resp, f).output_v2_hz, a, b)
                 for a, b in pieces)
    in_ms = sum(integrate_density(lambda f: noise_curves(resp, f).input_v2_hz, a, b)
                for a, b in pieces)
    return NoiseResult(tuple(spots), (float(lo), float(hi)), math.sqrt(in_ms),
                       math.sqrt(out_ms))


def _nf_db_at(design, r_s: float, f_hz: float) -> float:
    from freqpair.circuit.stage import build_stage
    from freqpair.design.keys import replace_value
    resp = StageResponses(build_stage(replace_value(design, "source.resistance", r_s)))
    nc = noise_curves(resp, [f_hz])
    part = nc.source_resistor_v2_hz()
    return 10.0 * math.log10(float(nc.output_v2_hz[0] / part[0]))


def optimum_source_resistance(design, f_hz: float, bounds=(1.0, 1e9)) -> tuple[float, float]:
    """The source resistance [Ω] that minimises the noise figure at ``f_hz`` [Hz].

    Each candidate R_s is a full analysis of the design with that
    ``source.resistance`` (the input network changes with it, so the noise
    transfers do too). A scan at four points per decade brackets the minimum,
    golden-section search on log R_s refines it to 1e-4 of a decade.

    Returns
    -------
    (float, float)
        R_opt [Ω] and NF_min [dB].
    """
    lo, hi = (math.log10(b) for b in bounds)
    xs = np.linspace(lo, hi, int(round((hi - lo) * 4)) + 1)
    nfs = [_nf_db_at(design, 10.0 ** x, f_hz) for x in xs]
    k = int(np.argmin(nfs))
    a, b = xs[max(k - 1, 0)], xs[min(k + 1, xs.size - 1)]
    g = (math.sqrt(5.0) - 1.0) / 2.0
    c, d = b - g * (b - a), a + g * (b - a)
    fc, fd = _nf_db_at(design, 10.0 ** c, f_hz), _nf_db_at(design, 10.0 ** d, f_hz)
    while b - a > 1e-4:
        if fc < fd:
            b, d, fd = d, c, fc
            c = b - g * (b - a)
            fc = _nf_db_at(design, 10.0 ** c, f_hz)
        else:
            a, c, fc = c, d, fd
            d = a + g * (b - a)
            fd = _nf_db_at(design, 10.0 ** d, f_hz)
    x = (a + b) / 2.0
    return 10.0 ** x, _nf_db_at(design, 10.0 ** x, f_hz)
