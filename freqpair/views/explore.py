"""Everything the interactive explorer shows, as plain arrays and rows (no plotting).

:func:`explore` turns a design and a frequency grid into one dict holding every
view's data: gain curves in dB and degrees, CMRR curves, the CMRR corner and
the frequency where CMRR falls to a user target, pole and zero points, the
metrics rows and the hand-versus-exact rows. The app (and anything else) only
has to copy these into its data sources. The module also knows the editable
values of a design (:func:`editable_values`) and how to switch a section's kind
(:func:`switch_kind`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from freqpair.design.schema import Design, design_to_dict, parse_design
from freqpair.design.errors import DesignError
from freqpair.analysis.hand import hand_table
from freqpair.analysis.loop import loop_analysis
from freqpair.studies.measured import MeasurementError, overlay
from freqpair.analysis.crossings import db
from freqpair.analysis.poles import response_zpk
from freqpair.analysis.summary import format_metric
from freqpair.design.quantities import format_si
from freqpair.analysis.responses import ZERO_GAIN_RATIO

__all__ = ["explore", "EXPLORE_PARTS", "parse_target_db",
           "explore_grid", "editable_values", "EditableValue", "switch_kind",
           "KIND_CHOICES", "curves_csv", "CURVE_COLUMNS", "measured_view", "MEASURED_PLOT",
           "SECOND_STAGE_DEFAULTS", "with_second_stage", "design_difference"]

#: Curve columns of ``explore(...)["curves"]`` in CSV order.
CURVE_COLUMNS = ("f_hz", "adm_db", "adm_deg", "acm_se_db", "acm_se_deg", "acm_dm_db",
                 "acm_dm_deg", "cmrr_se_db", "cmrr_db")

# ------------------------------------------------------------------ editable values
# leaf key -> (unit symbol for display, scale)  scale: "log" | "linear" | "int"
_UNITS = {
    "positive": ("V", "linear"), "negative": ("V", "linear"),
    "tail_current": ("A", "log"), "input_common_mode": ("V", "linear"),
    "temperature": ("K", "log"),
    "beta": ("", "log"), "early_voltage": ("V", "log"), "vbe": ("V", "linear"),
    "base_resistance": ("Ω", "log"), "cje": ("F", "log"), "transit_time": ("s", "log"),
    "ft": ("Hz", "log"), "cjc0": ("F", "log"), "phi_c": ("V", "linear"),
    "m_c": ("", "linear"), "ccs": ("F", "log"),
    "mobility_cox": ("A/V2", "log"), "width": ("m", "log"), "length": ("m", "log"),
    "threshold": ("V", "linear"), "lambda": ("1/V", "log"), "cox": ("F/m2", "log"),
    "overlap_cap": ("F/m", "log"), "cdb": ("F", "log"),
    "resistance": ("Ω", "log"), "capacitance": ("F", "log"),
    "degeneration": ("Ω", "log"), "extra_capacitance": ("F", "log"),
    "factor": ("", "log"), "start": ("Hz", "log"), "stop": ("Hz", "log"),
    "points_per_decade": ("", "int"),
    "output_resistance": ("Ω", "log"), "input_capacitance": ("F", "log"),
    "load_capacitance": ("F", "log"), "miller_capacitance": ("F", "log"),
    "nulling_resistance": ("Ω", "log"),
    "series_resistance": ("Ω", "log"), "shunt_resistance": ("Ω", "log"),
    "series_capacitance": ("F", "log"), "shunt_capacitance": ("F", "log"),
    "bias": ("V", "linear"), "surface_potential": ("V", "linear"), "csb": ("F", "log"),
    "flicker_corner": ("Hz", "log"), "noise_gamma": ("", "linear"),
    "body_effect": ("", "linear"),
}
_BY_KEY = {"mismatch.load": ("", "linear"), "mismatch.gm": ("", "linear"),
           "second_stage.gm": ("S", "log")}
# typical size used to place a log slider when the value is zero ("absent")
_TYPICAL = {"F": 1e-12, "Ω": 1e3, "s": 1e-10, "Hz": 1e9, "F/m": 1e-10, "F/m2": 1e-3}

_LABELS = {
    "supply.positive": "positive supply", "supply.negative": "negative supply",
    "bias.tail_current": "tail current", "bias.input_common_mode": "input common mode",
    "bias.temperature": "temperature", "source.resistance": "source resistance",
    "mismatch.load": "load mismatch ΔR/R", "mismatch.gm": "g_m mismatch Δg_m/g_m",
    "feedback.factor": "feedback factor β_f", "sweep.start": "sweep start",
    "sweep.stop": "sweep stop", "sweep.points_per_decade": "points per decade",
}


@dataclass(frozen=True)
class EditableValue:
    """One numeric value of a design the explorer lets the user edit.

    Attributes
    ----------
    key : str
        Dotted design key, e.g. ``"tail.capacitance"``.
    label : str
        Plain words for the control.
    value : float
        Current value in SI units.
    unit : str
        Display unit symbol ("" for plain numbers).
    scale : str
        ``"log"`` (slider over decades), ``"linear"`` or ``"int"``.
    slider_lo, slider_hi : float
        Slider range: log10 of the value for ``"log"``, the value itself otherwise.
    """

    key: str
    label: str
    value: float
    unit: str
    scale: str
    slider_lo: float
    slider_hi: float

    @property
    def text(self) -> str:
        """The value in engineering notation, e.g. ``"4.7 pF"``."""
        if self.scale == "int":
            return str(int(self.value))
        if not self.unit:
            return f"{self.value:.6g}"
        return format_si(self.value, self.unit.replace("A/V2", "A/V²").replace("F/m2", "F/m²"),
                         digits=6)

    def slider_value(self) -> float:
        """Where the slider sits for the current value."""
        if self.scale == "log":
            v = self.value if self.value > 0 else _TYPICAL.get(self.unit, 1.0)
            return math.log10(v)
        return float(self.value)

    def from_slider(self, position: float) -> float:
        """Design value [SI] for a slider position."""
        if self.scale == "log":
            return float(f"{10.0 ** position:.4g}")
        if self.scale == "int":
            return int(round(position))
        return float(f"{position:.6g}")


def _slider_range(value: float, unit: str, scale: str, key: str) -> tuple[float, float]:
    if scale == "log":
        centre = math.log10(value if value > 0 else _TYPICAL.get(unit, 1.0))
        return math.floor(centre) - 2.0, math.ceil(centre) + 2.0
    if key.startswith("mismatch."):
        return -0.2, 0.2
    if scale == "int":
        return 5.0, 200.0
    span = max(abs(value), 1.0)
    return (value - span, value + span) if value < 0 or key.endswith("negative") else (
        0.0, 2.0 * span)


def editable_values(design: Design) -> list[EditableValue]:
    """The design's numeric values in file order (kind keys and the name left out).

    Parameters
    ----------
    design : Design

    Returns
    -------
    list of EditableValue
    """
    out: list[EditableValue] = []

    def walk(node, prefix):
        for name, value in node.items():
            key = f"{prefix}{name}"
            if isinstance(value, dict):
                walk(value, key + ".")
            elif name in ("type", "name") or isinstance(value, (str, bool, list)):
                continue        # kinds, names and lists (elements, noise spots) apart
            else:
                unit, scale = _BY_KEY.get(key) or _UNITS.get(name, ("", "log"))
                lo, hi = _slider_range(float(value), unit, scale, key)
                label = _LABELS.get(key) or key.replace("_", " ")
                out.append(EditableValue(key, label, float(value), unit, scale, lo, hi))

    walk(design_to_dict(design), "")
    return out


# ------------------------------------------------------------------ kinds
#: Choices per section for the explorer's kind selectors.
KIND_CHOICES = {"pair": ("npn", "pnp", "nmos", "pmos"),
                "load": ("resistor", "mirror"),
                "tail": ("ideal", "norton", "mirror", "degenerated", "cascode")}

_DEVICES = {
    "npn": {"type": "npn", "beta": 200.0, "early_voltage": 80.0, "cje": 2e-12,
            "transit_time": 0.3e-9, "cjc0": 1e-12},
    "pnp": {"type": "pnp", "beta": 80.0, "early_voltage": 45.0, "cje": 2e-12,
            "transit_time": 1e-9, "cjc0": 1.5e-12},
    "nmos": {"type": "nmos", "mobility_cox": 200e-6, "width": 20e-6, "length": 1e-6,
             "threshold": 0.5, "lambda": 0.05, "cox": 4.6e-3, "overlap_cap": 0.3e-9,
             "cdb": 10e-15},
    "pmos": {"type": "pmos", "mobility_cox": 80e-6, "width": 40e-6, "length": 1e-6,
             "threshold": 0.5, "lambda": 0.08, "cox": 4.6e-3, "overlap_cap": 0.3e-9,
             "cdb": 20e-15},
}
_COMPLEMENT = {"npn": "pnp", "pnp": "npn", "nmos": "pmos", "pmos": "nmos"}


def _device_of(polarity: str, old: dict) -> dict:
    """The section's own device when it already has ``polarity``, else freqpair's default."""
    device = old.get("device")
    if isinstance(device, dict) and device.get("type") == polarity:
        return dict(device)
    return dict(_DEVICES[polarity])


def _section_template(section: str, kind: str, pair_type: str, old: dict) -> dict:
    if section == "pair":
        return dict(_DEVICES[kind])
    if section == "load":
        if kind == "resistor":
            return {"type": "resistor", "resistance": old.get("resistance", 10e3),
                    "capacitance": old.get("capacitance", 1e-12)}
        return {"type": "mirror", "capacitance": old.get("capacitance", 1e-12),
                "device": _device_of(_COMPLEMENT[pair_type], old)}
    if kind == "ideal":
        return {"type": "ideal"}
    if kind == "norton":
        return {"type": "norton", "resistance": old.get("resistance", 1e6),
                "capacitance": old.get("capacitance", old.get("extra_capacitance", 2e-12))}
    out = {"type": kind, "device": _device_of(pair_type, old),
           "extra_capacitance": old.get("extra_capacitance", old.get("capacitance", 0.5e-12))}
    if kind == "degenerated":
        out["degeneration"] = old.get("degeneration", 2e3)
    return out


def switch_kind(design: Design, section: str, kind: str) -> Design:
    """A copy of ``design`` with ``section`` ("pair", "load" or "tail") of a new kind.

    The new section starts from freqpair's defaults for that kind (resistances
    and capacitances carried over where they mean the same thing). A mirror
    load gets devices of the pair's complementary polarity (pnp for npn, pmos
    for nmos), a transistor tail ("mirror", "degenerated", "cascode") devices
    of the pair's own polarity (DESIGN.md §3a): the section's existing device
    when it already has that polarity, else freqpair's default device keys.
    The load's and tail's devices follow a changed pair polarity.

    Raises
    ------
    DesignError
        Unknown section or kind (one line naming it).
    """
    if section not in KIND_CHOICES:
        raise DesignError(f"{section}: not a section with a kind")
    if kind not in KIND_CHOICES[section]:
        raise DesignError(f"{section}.type = {kind!r}: must be one of "
                          f"{', '.join(KIND_CHOICES[section])}")
    data = design_to_dict(design)
    pair_type = kind if section == "pair" else data["pair"]["type"]
    data[section] = _section_template(section, kind, pair_type, data[section])
    if section == "pair":
        for other in ("load", "tail"):
            if "device" in data[other]:
                data[other] = _section_template(other, data[other]["type"], pair_type,
                                                data[other])
    return parse_design(data)


# ------------------------------------------------------------------ optional sections
#: Values a second stage starts from when the explorer adds one (SI units): a
#: common-emitter stage of 4 mS into 150 kΩ with a 3 pF Miller capacitor.
SECOND_STAGE_DEFAULTS = {"gm": 4e-3, "output_resistance": 150e3, "input_capacitance": 0.5e-12,
                         "load_capacitance": 10e-12, "miller_capacitance": 3e-12,
                         "nulling_resistance": 0.0}


def with_second_stage(design: Design, present: bool) -> Design:
    """A copy of ``design`` with a second stage (``present``) or without one.

    An added stage takes :data:`SECOND_STAGE_DEFAULTS`; a design that already
    has (or lacks) one is returned unchanged.
    """
    if (design.second_stage is not None) == bool(present):
        return design
    data = design_to_dict(design)
    if present:
        data["second_stage"] = dict(SECOND_STAGE_DEFAULTS)
    else:
        data.pop("second_stage", None)
    return parse_design(data)


# short names of often-compared values (the rest use the control's label)
_SHORT = {"tail.capacitance": "C_tail", "tail.resistance": "R_tail",
          "tail.extra_capacitance": "C_tail,extra", "tail.degeneration": "R_degeneration",
          "load.resistance": "R_load", "load.capacitance": "C_load",
          "bias.tail_current": "I_tail", "source.resistance": "R_s",
          "feedback.factor": "β_f", "mismatch.load": "ΔR/R", "mismatch.gm": "Δg_m/g_m",
          "second_stage.gm": "g_m2", "second_stage.miller_capacitance": "C_Miller",
          "second_stage.nulling_resistance": "R_null",
          "second_stage.load_capacitance": "C_L2", "second_stage.output_resistance": "R_out2",
          "second_stage.input_capacitance": "C_in2"}
_SECTION_WORDS = {"feedback": "feedback", "second_stage": "second stage"}


def _kinds(data: dict, prefix: str = "") -> dict:
    out = {}
    for name, value in data.items():
        if isinstance(value, dict):
            out[f"{prefix}{name}"] = value.get("type")
            out.update(_kinds(value, f"{prefix}{name}."))
    return out


def design_difference(old: Design, new: Design, limit: int = 2) -> str:
    """Short words for what ``old`` has that ``new`` has not (``old``'s values).

    Used to name a pinned snapshot against the design now on screen, e.g.
    ``"C_tail 2 pF"``, ``"tail norton"`` or ``"no second stage"``.

    Parameters
    ----------
    old, new : Design
    limit : int
        At most this many differences are named; the rest are counted ("+2 more").

    Returns
    -------
    str
        ``""`` when the two designs have the same values (the name aside).
    """
    parts: list[str] = []
    old_kinds, new_kinds = _kinds(design_to_dict(old)), _kinds(design_to_dict(new))
    changed_kind = set()
    for section, kind in old_kinds.items():
        if section not in new_kinds:
            continue
        if kind != new_kinds[section]:
            parts.append(f"{section.replace('_', ' ')} {kind}")
            changed_kind.add(section + ".")
    for section in new_kinds:
        if "." not in section and section not in old_kinds:
            parts.append(f"no {_SECTION_WORDS.get(section, section.replace('_', ' '))}")
            changed_kind.add(section + ".")
    old_values = editable_values(old)
    for section in old_kinds:
        n_values = sum(ev.key.startswith(section + ".") for ev in old_values)
        if "." not in section and section not in new_kinds and n_values > 1:
            parts.append(f"with {_SECTION_WORDS.get(section, section.replace('_', ' '))}")
            changed_kind.add(section + ".")
    new_values = {ev.key: ev for ev in editable_values(new)}
    for ev in old_values:
        if any(ev.key.startswith(p) for p in changed_kind):
            continue
        other = new_values.get(ev.key)
        if other is None or other.value != ev.value:
            name = _SHORT.get(ev.key) or ev.label.replace(".", " ")
            parts.append(f"{name} {ev.text}")
    if len(parts) > limit:
        parts = parts[:limit] + [f"+{len(parts) - limit} more"]
    return ", ".join(parts)


def parse_target_db(text: str, what: str) -> float:
    """A target typed as ``"60"`` or ``"60 dB"`` [dB] (``what``: the field's words).

    Raises
    ------
    DesignError
        One line naming the field and the value (not a number, or outside ±400 dB).
    """
    body = str(text).strip().removesuffix("dB").strip()
    try:
        value = float(body)
    except ValueError:
        raise DesignError(f"{what} = {text!r}: not a number of dB") from None
    if not -400 < value < 400:
        raise DesignError(f"{what} = {text!r}: outside ±400 dB")
    return value



# ------------------------------------------------------------------ the data
def explore_grid(design: Design, n_points: int = 500) -> np.ndarray:
    """Log grid [Hz] over the design's sweep range with ``n_points`` points."""
    sw = design.sweep
    return np.logspace(math.log10(sw.start), math.log10(sw.stop), int(n_points))


def _finite_db(x) -> np.ndarray:
    v = db(x)
    return np.where(np.isfinite(v), v, np.nan)


def _deg(x) -> np.ndarray:
    return np.degrees(np.unwrap(np.angle(x)))


def _nan(n):
    return np.full(n, np.nan)


def _pole_zero_points(analysis) -> dict:
    """Poles and zeros [Hz] of the primary gain (:func:`freqpair.analysis.poles.response_zpk`).

    Coincident pole-zero pairs cancel out of the gain and are left out, as in the
    pole-zero table of the reports.
    """
    zpk = response_zpk(analysis, analysis.primary)
    poles, zeros = np.asarray(zpk.poles_rad_s, complex), np.asarray(zpk.zeros_rad_s, complex)
    kinds = ["pole"] * len(poles) + ["zero"] * len(zeros)
    s = np.concatenate([poles, zeros]) / (2 * np.pi)
    return {"kind": kinds, "re_hz": s.real, "im_hz": s.imag, "mag_hz": np.abs(s),
            "abs_re_hz": np.where(s.real != 0, np.abs(s.real), np.nan),
            "half_plane": ["right" if v > 0 else "left" for v in s.real]}


def _rows_metrics(analysis, target_db, cross_hz, loop) -> list[tuple[str, str]]:
    op_units = {"ic": ("I_C", "A"), "id": ("I_D", "A"), "gm": ("g_m", "S"),
                "rpi": ("r_π", "Ω"), "ro": ("r_o", "Ω"), "cpi": ("C_π", "F"),
                "cmu": ("C_μ", "F"), "cgs": ("C_gs", "F"), "cgd": ("C_gd", "F"),
                "vce": ("V_CE", "V"), "vcb": ("V_CB", "V"), "vds": ("V_DS", "V"),
                "vgs": ("V_GS", "V")}
    rows = []
    for key, value in analysis.operating_point.to_json().items():
        label, unit = op_units.get(key, (key, ""))
        rows.append((f"operating point {label}", format_si(value, unit) if value is not None
                     else "∞"))

    def dbtxt(v, none="—"):
        return none if v is None else f"{v:.2f} dB"

    gain_name = {"adm": "differential gain A_dm", "adm_se": "differential gain A_dm,se (o2)",
                 "a_total": "overall gain A_total"}[analysis.primary]
    if analysis.a_total_db is not None:
        rows.append(("first-stage gain at o2", dbtxt(analysis.adm_db_first)))
    rows += [
        (f"{gain_name} at DC", dbtxt(analysis.adm_db)),
        ("common-mode gain A_cm,se at DC", dbtxt(analysis.acm_se_db, "0 (exactly)")),
        ("−3 dB frequency f_3dB", format_si(analysis.f3db_hz, "Hz")),
        ("unity-gain frequency", format_si(analysis.ugf_hz, "Hz")),
        ("CMRR single-ended at DC", dbtxt(analysis.cmrr_se_db, "∞")),
    ]
    if analysis.stage.balanced:
        rows.append(("CMRR balanced at DC", dbtxt(analysis.cmrr_db, "∞ (perfectly matched)")))
        rows.append(("A_dm / A_cm-cm (textbook ratio)", dbtxt(analysis.cmrr_textbook_db, "∞")))
    rows.append(("CMRR corner (−3 dB)", format_si(analysis.cmrr_corner_hz, "Hz")))
    rows.append((f"CMRR falls to target {target_db:g} dB at", _cross_text(analysis, target_db,
                                                                       cross_hz)))
    rows += _tail_rows(analysis)
    rows += _loop_rows(analysis, loop)
    return rows


def _tail_rows(analysis) -> list[tuple[str, str]]:
    """The tail's Norton view (DESIGN.md §3a) as rows; ideal tail → ∞."""
    tail = analysis.tail
    if tail is None:
        return [("tail resistance (Norton)", "∞ (ideal)"),
                ("tail capacitance (Norton)", "— (ideal)")]
    fin = (lambda v, u: format_si(v, u) if math.isfinite(v) else "∞")
    rows = [("tail resistance (Norton)", fin(tail.resistance, "Ω")),
            ("tail capacitance (Norton)", fin(tail.capacitance, "F"))]
    if tail.pair_capacitance:
        rows.append(("pair's own capacitance at the tail", fin(tail.pair_capacitance, "F")))
    return rows


def _loop_rows(analysis, loop) -> list[tuple[str, str]]:
    """Margins and closed-loop numbers of a design with ``[feedback]``."""
    if analysis.design.feedback is None:
        return [("loop margins", "set a feedback factor to see them")]
    if loop is None:
        return [("loop margins", "none (the differential gain is zero)")]

    def opt(key, v, none="no crossing"):   # numbers as the reports write them
        return none if v is None or not math.isfinite(v) else format_metric(key, v)

    return [
        ("loop gain at DC", opt("dc_loop_gain_db", loop.dc_loop_gain_db, "—")),
        ("phase margin", opt("phase_margin_deg", loop.phase_margin_deg)),
        ("gain margin", opt("gain_margin_db", loop.gain_margin_db)),
        ("loop crossover", opt("crossover_hz", loop.crossover_hz)),
        ("closed-loop −3 dB frequency", opt("closed_loop_f3db_hz", loop.closed_loop_f3db_hz,
                                            "none")),
        ("closed-loop peaking", opt("peaking_db", loop.peaking_db, "—")),
        ("closed loop stable", "yes" if loop.closed_loop_stable else "NO (right half-plane "
                                                                     "poles)"),
    ]


def _cross_text(analysis, target_db, cross_hz) -> str:
    if cross_hz is not None:
        return format_si(cross_hz, "Hz")
    if analysis.cmrr_se_db is None:
        return "never (CMRR is infinite)"
    if analysis.cmrr_se_db < target_db:
        return "already below at DC"
    return "never in range"


def _hand_rows(analysis) -> dict:
    cols = {"quantity": [], "exact": [], "approx": [], "error": [], "method": []}
    for r in hand_table(analysis):
        unit = r.unit or ""
        fmt = ((lambda v: "—" if v is None else f"{v:.2f} dB") if unit == "dB"
               else (lambda v, u=unit: format_si(v, u)))
        cols["quantity"].append(r.label)
        cols["exact"].append(fmt(r.exact))
        cols["approx"].append(fmt(r.approx))
        cols["error"].append("—" if r.error_pct is None else f"{r.error_pct:+.1f} %")
        cols["method"].append(r.method + (f" ({r.note})" if r.note else ""))
    return cols


#: The parts of :func:`explore`'s answer that can be left out (``parts=``).
EXPLORE_PARTS = ("poles_zeros", "metrics", "hand")


def explore(design: Design, f_hz=None, target_db: float = 60.0, analysis=None,
            measurement=None, parts=None) -> dict:
    """Every view of the explorer for one design, as plain arrays and rows.

    Parameters
    ----------
    design : Design
    f_hz : array_like, optional
        Plotting grid [Hz]; default :func:`explore_grid` (500 points over the sweep).
    target_db : float
        CMRR target [dB]; the frequency where the single-ended CMRR falls to it
        is found on the exact response.
    analysis : Analysis, optional
        A ready :func:`freqpair.analyze` result for ``design``.
    measurement : freqpair.studies.measured.Measurement, optional
        A bench measurement to lay over the model (see :func:`measured_view`).
    parts : iterable of str, optional
        Which of :data:`EXPLORE_PARTS` to compute (default all); a part left
        out is None in the answer (the explorer fills a table only while it is
        shown).

    Returns
    -------
    dict
        ``curves``: columns :data:`CURVE_COLUMNS` (gains in dB, phases in
        degrees, unwrapped; NaN where a gain is exactly zero or absent);
        ``corner``: ``{"f_hz", "cmrr_db"}`` lists (empty without a corner);
        ``target``: ``{"f_hz", "cmrr_db"}`` of the target crossing (empty if none);
        ``target_db``; ``poles_zeros``: ``kind``, ``re_hz``, ``im_hz``,
        ``mag_hz``, ``abs_re_hz``, ``half_plane``; ``metrics``:
        ``{"quantity", "value"}``; ``hand``: ``{"quantity", "exact",
        "approx", "error", "method"}``; scalars ``cmrr_corner_hz``,
        ``target_cross_hz``, ``f3db_hz``, ``ugf_hz``; ``primary`` (name of the
        gain plotted as A_dm) and ``balanced``; ``measured``: the
        :func:`measured_view` of ``measurement`` (None without one) and
        ``measured_note``: why a given measurement cannot be compared with this
        design ("" when it can); with ``[feedback]``: ``loop`` (the
        :class:`~freqpair.analysis.loop.LoopResult` the metric rows were written
        from; None without ``[feedback]`` or with a zero gain) and its scalars
        ``phase_margin_deg``, ``crossover_hz`` (None without a loop or a crossing).

    Raises
    ------
    FreqpairError
        Infeasible bias or an unsolvable network (one line).
    """
    if analysis is None:
        from freqpair.analysis.result import analyze
        analysis = analyze(design)
    f = explore_grid(design) if f_hz is None else np.asarray(f_hz, dtype=float)
    r = analysis.responses.at(f, signal_only=True)    # no rails here
    n = f.size
    main = r.get(analysis.primary)
    ref = np.abs(r.adm if r.adm is not None else r.adm_se)

    def zeroed(x):   # a gain zero to rounding (DESIGN.md §2) is exactly zero: no curve
        return np.where(np.abs(x) <= ZERO_GAIN_RATIO * ref, 0.0, x)

    acm_se = zeroed(r.acm_se)
    curves = {"f_hz": f, "adm_db": _finite_db(main), "adm_deg": _deg(main),
              "acm_se_db": _finite_db(acm_se), "acm_se_deg": _deg(r.acm_se)}
    if r.acm_dm is not None:
        curves["acm_dm_db"] = _finite_db(zeroed(r.acm_dm))
        curves["acm_dm_deg"] = np.where(np.isfinite(curves["acm_dm_db"]), _deg(r.acm_dm),
                                        np.nan)
        curves["cmrr_db"] = _finite_db(r.adm) - curves["acm_dm_db"]
    else:
        curves["acm_dm_db"] = curves["acm_dm_deg"] = curves["cmrr_db"] = _nan(n)
    curves["cmrr_se_db"] = _finite_db(r.adm_se) - _finite_db(acm_se)
    for k in ("acm_se_deg",):
        curves[k] = np.where(np.isfinite(curves["acm_se_db"]), curves[k], np.nan)

    corner = analysis.cmrr_corner_hz
    cross = analysis.cmrr_se_crossing_hz(float(target_db))
    marks = [x for x in (corner, cross) if x is not None]
    at_marks = analysis.responses.at(marks, signal_only=True) if marks else None
    mark_db = list(db(at_marks.adm_se) - db(at_marks.acm_se)) if marks else []
    corner_pt = {"f_hz": [corner], "cmrr_db": [mark_db[0]]} if corner is not None else {
        "f_hz": [], "cmrr_db": []}
    target_pt = {"f_hz": [cross], "cmrr_db": [float(target_db)]} if cross is not None else {
        "f_hz": [], "cmrr_db": []}
    loop = loop_analysis(analysis) if analysis.design.feedback is not None else None
    want = set(EXPLORE_PARTS if parts is None else parts)
    rows = _rows_metrics(analysis, float(target_db), cross, loop) if "metrics" in want else []
    measured, note = None, ""
    if measurement is not None:
        try:
            measured = measured_view(analysis, measurement)
        except MeasurementError as exc:
            note = str(exc)
        rows += _measured_rows(measured, note)
    return {
        "curves": curves,
        "corner": corner_pt,
        "target": target_pt,
        "target_db": float(target_db),
        "poles_zeros": _pole_zero_points(analysis) if "poles_zeros" in want else None,
        "metrics": ({"quantity": [q for q, _ in rows], "value": [v for _, v in rows]}
                    if "metrics" in want else None),
        "hand": _hand_rows(analysis) if "hand" in want else None,
        "cmrr_corner_hz": corner,
        "target_cross_hz": cross,
        "f3db_hz": analysis.f3db_hz,
        "ugf_hz": analysis.ugf_hz,
        "primary": analysis.primary,
        "balanced": analysis.stage.balanced,
        "measured": measured,
        "measured_note": note,
        "loop": loop,
        "phase_margin_deg": None if loop is None else _finite_or_none(loop.phase_margin_deg),
        "crossover_hz": None if loop is None else _finite_or_none(loop.crossover_hz),
    }


def _finite_or_none(x) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


#: Which explorer plot a measured kind is drawn on: "gains" (magnitude) or "cmrr".
MEASURED_PLOT = {"adm": "gains", "adm_se": "gains", "acm_se": "gains", "acm_dm": "gains",
                 "cmrr": "cmrr", "cmrr_balanced": "cmrr"}


def measured_view(analysis, measurement) -> dict:
    """A measurement beside the model, as columns for the explorer's plots.

    Parameters
    ----------
    analysis : Analysis
    measurement : freqpair.studies.measured.Measurement

    Returns
    -------
    dict
        ``columns``: ``f_hz`` [Hz], ``measured_db``, ``model_db``, ``residual_db``
        (measured − model) [dB] at the measured frequencies (from
        :func:`freqpair.studies.measured.overlay`); ``kind``, ``label``, ``plot`` (see
        :data:`MEASURED_PLOT`), ``origin`` (file name), ``rms_residual_db``,
        ``max_abs_residual_db`` [dB] and ``rms_residual_deg`` [deg] (None
        without a measured phase).

    Raises
    ------
    MeasurementError
        The measured kind is not defined for this stage, or the model is zero there.
    """
    ov = overlay(analysis, measurement)
    cols = {"f_hz": np.asarray(ov.f_hz, float), "measured_db": np.asarray(ov.measured_db, float),
            "model_db": np.asarray(ov.model_db, float),
            "residual_db": np.asarray(ov.residual_db, float)}
    return {"columns": cols, "kind": ov.kind, "label": ov.label, "plot": MEASURED_PLOT[ov.kind],
            "origin": measurement.origin, "rms_residual_db": ov.rms_residual_db,
            "max_abs_residual_db": ov.max_abs_residual_db,
            "rms_residual_deg": ov.rms_residual_deg}


def _measured_rows(measured, note) -> list[tuple[str, str]]:
    if measured is None:
        return [("measurement", f"not compared: {note}")]
    rows = [("measurement", f"{measured['origin']} ({measured['kind']}, "
                            f"{len(measured['columns']['f_hz'])} points)"),
            ("measured − model, rms", f"{measured['rms_residual_db']:.2f} dB"),
            ("measured − model, largest |·|", f"{measured['max_abs_residual_db']:.2f} dB")]
    if measured["rms_residual_deg"] is not None:
        rows.append(("measured − model, phase rms", f"{measured['rms_residual_deg']:.1f}°"))
    return rows


def curves_csv(curves: dict) -> str:
    """CSV text of the ``curves`` columns; NaN (no value) is an empty cell."""
    from freqpair.design.files import csv_text
    cols = [c for c in CURVE_COLUMNS if c in curves]
    return csv_text(cols, zip(*(np.asarray(curves[c], dtype=float) for c in cols)))
