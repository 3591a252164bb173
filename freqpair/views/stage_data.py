"""Plain data of the loop, supply, input-impedance, noise and pole-path views (no Bokeh).

The explorer and the HTML report draw these same columns, marks and texts, so
the two faces cannot disagree. Every mark carries the text shown beside it,
formatted as the JSON value is formatted everywhere
(:func:`freqpair.analysis.summary.format_metric`).
"""
from __future__ import annotations

import math

import numpy as np

from freqpair.analysis.crossings import DB_3, db
from freqpair.analysis.summary import format_metric
from freqpair.design.quantities import format_si

__all__ = ["loop_view", "supply_view", "input_view", "noise_view", "locus_view",
           "EMPTY_MARK"]

#: An empty mark (no point, no text): the columns every mark source has.
EMPTY_MARK = {"x": [], "y": [], "text": []}


def _mark(x, y, text) -> dict:
    if x is None or y is None or not (math.isfinite(x) and math.isfinite(y)):
        return {"x": [], "y": [], "text": []}
    return {"x": [float(x)], "y": [float(y)], "text": [text]}


def _phase_deg(values: np.ndarray) -> np.ndarray:
    return np.degrees(np.unwrap(np.angle(values)))


#: ``loop_view(..., result=_COMPUTE)``: find the loop's numbers here.
_COMPUTE = object()


def loop_view(analysis, f_hz, result=_COMPUTE) -> dict | None:
    """Loop gain, β, closed loop and step of a design with ``[feedback]``.

    Parameters
    ----------
    analysis : Analysis
    f_hz : array_like
        Frequency grid of the curves [Hz].
    result : LoopResult or None, optional
        The :func:`~freqpair.analysis.loop.loop_analysis` of ``analysis`` when
        the caller has it already (None: a zero gain, no loop numbers); by
        default it is computed here.

    Returns
    -------
    dict or None
        None without ``[feedback]``. Else: ``curves`` (``f_hz``, ``loop_db``,
        ``loop_deg`` continuous from 0°, ``beta_db``, ``closed_db``), ``step``
        (``t_s``, ``y``; ``band_lo``/``band_hi`` the ±1 % band), marks
        (``crossover``, ``phase_margin``, ``gain_margin``, ``closed_f3db``,
        ``peaking``, ``overshoot``, ``settling``, each ``x``, ``y``, ``text``),
        ``result`` (the :class:`~freqpair.analysis.loop.LoopResult`) and
        ``divider`` (True for a divider).
    """
    from freqpair.analysis.loop import loop_analysis, loop_model
    if analysis.design.feedback is None:
        return None
    model = loop_model(analysis)
    res = loop_analysis(analysis) if result is _COMPUTE else result
    f = np.asarray(f_hz, dtype=float)
    t = model.loop_gain(f)
    curves = {"f_hz": f, "loop_db": db(t), "loop_deg": model.loop_phase_deg(f, t),
              "beta_db": db(model.beta_at(f)), "closed_db": db(model.closed_loop(f))}
    marks = {k: dict(EMPTY_MARK) for k in ("crossover", "phase_margin", "gain_margin",
                                            "closed_f3db", "peaking", "overshoot",
                                            "settling")}
    step = {"t_s": np.zeros(0), "y": np.zeros(0), "band_lo": np.zeros(0),
            "band_hi": np.zeros(0)}
    if res is not None:
        if res.crossover_hz is not None:
            ph = float(model.loop_phase_deg(res.crossover_hz)[0])
            marks["crossover"] = _mark(res.crossover_hz, 0.0, "crossover "
                                       + format_metric("crossover_hz", res.crossover_hz))
            marks["phase_margin"] = _mark(res.crossover_hz, ph, "phase margin "
                                          + format_metric("phase_margin_deg",
                                                          res.phase_margin_deg))
        if res.phase_crossover_hz is not None:
            marks["gain_margin"] = _mark(res.phase_crossover_hz, -res.gain_margin_db,
                                         "gain margin "
                                         + format_metric("gain_margin_db", res.gain_margin_db))
        dc_db = 20 * math.log10(abs(res.closed_loop_dc_gain))
        if res.closed_loop_f3db_hz is not None:
            marks["closed_f3db"] = _mark(res.closed_loop_f3db_hz, dc_db - DB_3,
                                         "−3 dB " + format_metric("closed_loop_f3db_hz",
                                                                  res.closed_loop_f3db_hz))
        if res.peak_hz is not None:
            marks["peaking"] = _mark(res.peak_hz, dc_db + res.peaking_db, "peaking "
                                     + format_metric("peaking_db", res.peaking_db))
        if res.closed_loop_stable:
            ts, y = model.step()
            final = res.closed_loop_dc_gain
            step = {"t_s": ts, "y": y, "band_lo": np.full(ts.shape, final * 0.99),
                    "band_hi": np.full(ts.shape, final * 1.01)}
            if res.peak_time_s is not None:
                y_pk = final * (1 + res.overshoot_pct / 100.0)
                marks["overshoot"] = _mark(res.peak_time_s, y_pk, "overshoot "
                                           + format_metric("overshoot_pct", res.overshoot_pct))
            if res.settling_time_s is not None:
                y_s = float(model.step([res.settling_time_s])[1][0])
                marks["settling"] = _mark(res.settling_time_s, y_s, "1 % settling "
                                          + format_metric("settling_time_s",
                                                          res.settling_time_s))
    return {"curves": curves, "step": step, "marks": marks, "result": res,
            "divider": analysis.design.feedback.type == "divider"}


def supply_view(analysis, f_hz, target_db: float | None = None) -> dict:
    """PSRR± and the rails' gains against frequency, corners and a target crossing.

    Returns
    -------
    dict
        ``curves`` (``f_hz``, ``psrr_pos_db``, ``psrr_neg_db``, ``a_vpos_db``,
        ``a_vneg_db``; +inf where a rail's gain is zero: drawn as a gap),
        marks ``corner_pos``, ``corner_neg``, ``target_pos``, ``target_neg``
        (where each PSRR falls to ``target_db``), and ``result`` (the DC values
        and corners).
    """
    from freqpair.analysis.crossings import lowest_crossing
    from freqpair.analysis.supply import psrr_db, single_ended_name
    f = np.asarray(f_hz, dtype=float)
    resp = analysis.responses
    r = resp.at(f)
    se = single_ended_name(resp)
    sup = analysis.supply
    curves = {"f_hz": f, "psrr_pos_db": psrr_db(r, "vpos", se),
              "psrr_neg_db": psrr_db(r, "vneg", se), "a_vpos_db": db(r.a_vpos),
              "a_vneg_db": db(r.a_vneg)}
    for k in curves:
        if k != "f_hz":
            v = np.asarray(curves[k], dtype=float)
            curves[k] = np.where(np.isfinite(v), v, np.nan)
    marks = {}
    for sign, rail in (("pos", "vpos"), ("neg", "vneg")):
        fc = getattr(sup, f"psrr_{sign}_corner_hz")
        level = getattr(sup, f"psrr_{sign}_db")
        text = f"PSRR{'+' if sign == 'pos' else '−'} corner " + format_si(fc, "Hz")
        marks[f"corner_{sign}"] = _mark(fc, None if level is None else level - DB_3, text)
        marks[f"target_{sign}"] = dict(EMPTY_MARK)
        if target_db is not None and level is not None and level > target_db:
            def curve(x, rail=rail):
                return psrr_db(resp.at(np.atleast_1d(x)), rail, se)
            fx = lowest_crossing(curve, target_db, analysis._search,
                                 curve(analysis._search))
            marks[f"target_{sign}"] = _mark(fx, target_db, "falls to target at "
                                            + format_si(fx, "Hz"))
    return {"curves": curves, "marks": marks, "result": sup}


def input_view(analysis, f_hz) -> dict:
    """|Z_in,dm| and |Z_in,cm| [Ω] and their phases against frequency, with the DM corner."""
    f = np.asarray(f_hz, dtype=float)
    r = analysis.responses.at(f)
    out = {"f_hz": f}
    for name in ("zin_dm", "zin_cm"):
        z = r.get(name)
        mag = np.abs(z)
        big = ~np.isfinite(mag) | (mag > 1e15)
        out[f"{name}_ohm"] = np.where(big, np.nan, mag)
        out[f"{name}_deg"] = np.where(big, np.nan, np.degrees(np.angle(z)))
    zi = analysis.input_impedance
    corner = dict(EMPTY_MARK)
    if zi.zin_dm_corner_hz is not None:
        zc = abs(complex(analysis.responses.at([zi.zin_dm_corner_hz]).zin_dm[0]))
        corner = _mark(zi.zin_dm_corner_hz, zc, "Z_in,dm corner "
                       + format_si(zi.zin_dm_corner_hz, "Hz"))
    return {"curves": out, "marks": {"corner": corner}, "result": zi}


def noise_view(analysis, f_hz, at_hz: float | None = None) -> dict:
    """Input-referred noise density and who contributes at a chosen frequency.

    Returns
    -------
    dict
        ``curves`` (``f_hz``, ``en_v_rthz``, ``out_v_rthz``), ``at_hz``, the
        ``contributors`` table (``name``, ``share`` [%] text, ``density``
        text: each source's share of the input-referred density; the same as
        numbers in ``share_pct`` [%] and ``density_v_rthz`` [V/√Hz]), the spot
        mark, and ``result`` (the JSON noise object's values: spots, rms).
    """
    from freqpair.analysis.noise import noise_curves
    f = np.asarray(f_hz, dtype=float)
    f = f[f > 0]
    nc = noise_curves(analysis.responses, f)
    res = analysis.noise()
    at = float(at_hz) if at_hz is not None else res.spots[0].f_hz
    spot = noise_curves(analysis.responses, [at])
    shares = spot.shares()[0]
    order = np.argsort(-shares, kind="stable")
    en_total = float(spot.input_v_rthz[0])
    table = {"name": [], "share": [], "density": [], "share_pct": [], "density_v_rthz": []}
    for k in order:
        if shares[k] <= 0:
            continue
        part = en_total * math.sqrt(shares[k])
        table["name"].append(spot.names[k])
        table["share"].append(f"{100 * shares[k]:.2f} %")
        table["density"].append(format_si(part, "V/√Hz"))
        table["share_pct"].append(100 * float(shares[k]))
        table["density_v_rthz"].append(part)
    mark = _mark(at, en_total, f"e_n {format_si(en_total, 'V/√Hz')} at {format_si(at, 'Hz')}")
    return {"curves": {"f_hz": f, "en_v_rthz": nc.input_v_rthz, "out_v_rthz": nc.output_v_rthz},
            "at_hz": at, "contributors": table, "marks": {"spot": mark}, "result": res}


def locus_view(design, key: str, values, gain: str | None = None,
               current: float | None = None) -> dict:
    """Pole and zero paths for the pole-zero map (|Re|/2π log axis, Im/2π).

    Returns
    -------
    dict
        ``paths`` (``xs``, ``ys``, ``kind`` per path: multi-line data),
        ``points`` (``x``, ``y``, ``kind``, ``value``: every step's roots, with
        the key's value for the hover), ``key``, ``gain``, ``locus`` (the
        :class:`~freqpair.studies.locus.Locus`).
    """
    from freqpair.studies.locus import locus
    res = locus(design, key, values, gain)
    paths = {"xs": [], "ys": [], "kind": []}
    points = {"x": [], "y": [], "kind": [], "value": []}
    for kind, arr in (("pole", res.poles_hz), ("zero", res.zeros_hz)):
        for j in range(arr.shape[1]):
            col = arr[:, j]
            ok = np.isfinite(col)
            if not ok.any():
                continue
            x = np.abs(col.real[ok])
            keep = x > 0
            paths["xs"].append(list(x[keep]))
            paths["ys"].append(list(col.imag[ok][keep]))
            paths["kind"].append(kind)
            for v, z in zip(np.asarray(res.values)[ok][keep], col[ok][keep]):
                points["x"].append(abs(z.real))
                points["y"].append(z.imag)
                points["kind"].append(kind)
                points["value"].append(float(v))
    return {"paths": paths, "points": points, "key": key, "gain": res.gain, "locus": res}
