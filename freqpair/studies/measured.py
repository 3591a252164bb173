"""Measured responses: read a bench measurement from CSV and lay the model over it.

A measurement is one gain of a built stage versus frequency: the differential
gain, a common-mode gain or the CMRR, as magnitude (dB or V/V) and, optionally,
phase (degrees). :func:`read_measurement` reads it from a CSV file with a
header row; :func:`overlay` evaluates the exact model at the measured
frequencies and returns the residual (measurement − model).

CSV layout
----------
One header row, then one row per frequency, comma separated (tab also
accepted). Lines starting with ``#`` and blank lines are skipped. Column
names are matched without regard to case; a unit may follow the name in
brackets, ``frequency [kHz]``, ``magnitude [dB]``, ``gain (V/V)``,
``phase [deg]``, or as a suffix, ``magnitude_db``, ``gain_vv``. Cells may
carry their own unit (``"1.5 kHz"``, ``"-20 dB"``, ``"0.1 V/V"``); all
magnitude cells must agree with each other and with the header.

Kinds (see DESIGN.md §2 for the definitions)
--------------------------------------------
``adm``            the design's differential gain (A_dm; A_dm,se with a
                   mirror load; A_total with a second stage)
``adm_se``         single-ended differential gain A_dm,se = v_o2/v_id
``acm_se``         single-ended common-mode gain A_cm,se = v_o2/v_ic
``acm_dm``         common-mode to differential gain A_cm-dm = v_od/v_ic
``cmrr``           single-ended CMRR, A_dm,se / A_cm,se
``cmrr_balanced``  balanced CMRR, A_dm / A_cm-dm

The phase of a CMRR is the angle of that complex ratio.
"""
from __future__ import annotations

import csv
import math
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from freqpair.design.errors import FreqpairError

__all__ = ["MeasurementError", "Measurement", "Overlay", "KINDS", "normalize_kind",
           "read_measurement", "parse_measurement_text", "model_response", "overlay",
           "wrap_deg"]


class MeasurementError(FreqpairError, ValueError):
    """A measurement file or its use is invalid (one line naming file, line and value)."""


#: Measured kinds and what they are.
KINDS = {
    "adm": "differential gain (the design's primary gain)",
    "adm_se": "single-ended differential gain A_dm,se = v_o2/v_id",
    "acm_se": "single-ended common-mode gain A_cm,se = v_o2/v_ic",
    "acm_dm": "common-mode to differential gain A_cm-dm = v_od/v_ic",
    "cmrr": "single-ended CMRR |A_dm,se / A_cm,se|",
    "cmrr_balanced": "balanced CMRR |A_dm / A_cm-dm|",
}

_KIND_ALIASES = {
    "a_dm": "adm", "dm": "adm", "a_dm,se": "adm_se", "a_cm,se": "acm_se", "acm": "acm_se",
    "a_cm-dm": "acm_dm", "acm-dm": "acm_dm", "cmrr_se": "cmrr", "cmrr-balanced": "cmrr_balanced",
}

_FREQ_NAMES = ("frequency", "freq", "f")
_MAG_NAMES = ("magnitude", "mag", "gain", "db", "vv")
_PHASE_NAMES = ("phase", "deg", "angle")
_MAG_UNITS = {"db": "dB", "v/v": "V/V", "vv": "V/V", "v_v": "V/V"}
_FREQ_SCALE = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_PHASE_UNITS = {"deg", "degree", "degrees", "°"}
_DB_PER_NEPER = 20.0 / math.log(10.0)


def normalize_kind(kind: str) -> str:
    """Canonical kind name (``"A_cm,se"`` → ``"acm_se"``); MeasurementError if unknown."""
    key = str(kind).strip().lower()
    key = _KIND_ALIASES.get(key, key)
    if key not in KINDS:
        raise MeasurementError(f"kind = {kind!r}: must be one of {', '.join(KINDS)}")
    return key


def wrap_deg(x) -> np.ndarray:
    """Angles [deg] wrapped to (−180, 180]."""
    x = np.asarray(x, dtype=float)
    return 180.0 - np.mod(180.0 - x, 360.0)


@dataclass(frozen=True)
class Measurement:
    """A measured gain versus frequency.

    Attributes
    ----------
    kind : str
        One of :data:`KINDS`.
    f_hz : ndarray
        Frequencies [Hz], strictly increasing, positive.
    magnitude_db : ndarray
        Magnitude [dB] (converted from V/V when given so).
    phase_deg : ndarray or None
        Phase [deg] as measured (not unwrapped), or None.
    origin : str
        File name (for messages).
    lines : ndarray
        Source line number of each point (1-based).
    """

    kind: str
    f_hz: np.ndarray
    magnitude_db: np.ndarray
    phase_deg: np.ndarray | None
    origin: str = "<measurement>"
    lines: np.ndarray | None = None

    def __post_init__(self):
        object.__setattr__(self, "kind", normalize_kind(self.kind))
        for name in ("f_hz", "magnitude_db", "phase_deg", "lines"):
            v = getattr(self, name)
            if v is None:
                continue
            v = np.array(v, dtype=float if name != "lines" else int)
            v.setflags(write=False)
            object.__setattr__(self, name, v)
        f = self.f_hz
        if f.ndim != 1 or f.size == 0:
            raise MeasurementError(f"{self.origin}: no data rows")
        if self.magnitude_db.shape != f.shape or (
                self.phase_deg is not None and self.phase_deg.shape != f.shape):
            raise MeasurementError(f"{self.origin}: frequency, magnitude and phase lengths differ")
        if not (np.all(np.isfinite(f)) and np.all(f > 0) and np.all(np.diff(f) > 0)):
            raise MeasurementError(f"{self.origin}: frequencies must be positive, finite and "
                                   "strictly increasing")
        if not np.all(np.isfinite(self.magnitude_db)):
            raise MeasurementError(f"{self.origin}: magnitudes must be finite")
        if self.phase_deg is not None and not np.all(np.isfinite(self.phase_deg)):
            raise MeasurementError(f"{self.origin}: phases must be finite")

    def __len__(self) -> int:
        return int(self.f_hz.size)


# ------------------------------------------------------------------ reading
def _split_header(cell: str) -> tuple[str, str]:
    """'Magnitude [dB]' → ('magnitude', 'db'); 'gain_vv' → ('gain', 'vv')."""
    text = cell.strip().lower()
    if text in ("db", "vv", "deg"):
        return text, text
    m = re.fullmatch(r"(.*?)\s*[\[(]\s*([^\])]*?)\s*[\])]", text)
    if m:
        return m.group(1).strip(), m.group(2).replace(" ", "")
    for suffix in ("_db", "_vv", "_v/v", "_deg", "_hz", "_khz", "_mhz", "_ghz"):
        if text.endswith(suffix) and len(text) > len(suffix):
            return text[: -len(suffix)], suffix[1:]
    return text, ""


def _find_column(headers, wanted: str | None, matches, role: str, option: str, origin: str,
                 required: bool = True, exclude=()):
    names = [_split_header(h) for h in headers]
    if wanted is not None:
        w = wanted.strip().lower()
        for i, (h, (name, _)) in enumerate(zip(headers, names)):
            if h.strip().lower() == w or name == w:
                return i
        raise MeasurementError(f"{origin}: no column {wanted!r} for the {role} "
                               f"(columns: {', '.join(headers)})")
    hits = [i for i, (name, unit) in enumerate(names)
            if i not in exclude and matches(name, unit)]
    if len(hits) > 1:
        both = " and ".join(repr(headers[i]) for i in hits)
        raise MeasurementError(f"{origin}: columns {both} could both be the {role}; "
                               f"choose one with {option}")
    if not hits:
        if not required:
            return None
        raise MeasurementError(f"{origin}: no {role} column found (columns: "
                               f"{', '.join(headers)}); name it with {option}")
    return hits[0]


_CELL = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?|[-+]?(?:nan|inf|infinity))"
                   r"\s*([^\s\d].*?)?\s*$", re.IGNORECASE)


def _number(cell: str, where: str, what: str) -> tuple[float, str]:
    text = cell.strip()
    if not text:
        raise MeasurementError(f"{where}: {what} is empty")
    m = _CELL.match(text)
    if not m:
        raise MeasurementError(f"{where}: {what} = {text!r}: not a number")
    value = float(m.group(1))
    if not math.isfinite(value):
        raise MeasurementError(f"{where}: {what} = {text!r}: not a finite number (NaN/inf)")
    return value, (m.group(2) or "")


def parse_measurement_text(text: str, kind: str, *, origin: str = "<text>",
                           frequency_column: str | None = None,
                           magnitude_column: str | None = None,
                           phase_column: str | None = None,
                           magnitude_unit: str | None = None,
                           use_phase: bool = True) -> Measurement:
    """Parse CSV text into a :class:`Measurement` (see the module notes for the layout).

    Parameters
    ----------
    text : str
        CSV text with a header row.
    kind : str
        What was measured, one of :data:`KINDS`.
    origin : str
        Name used in messages (usually the file path).
    frequency_column, magnitude_column, phase_column : str, optional
        Column names to use instead of the automatic choice.
    magnitude_unit : {"dB", "V/V"}, optional
        Unit of the magnitude column when neither header nor cells say it.
    use_phase : bool
        Read the phase column when there is one.

    Returns
    -------
    Measurement
        Frequencies [Hz], magnitude [dB], phase [deg] or None.

    Raises
    ------
    MeasurementError
        One line naming the file, the line number and the value.
    """
    kind = normalize_kind(kind)
    forced = None
    if magnitude_unit is not None:
        forced = _MAG_UNITS.get(str(magnitude_unit).strip().lower())
        if forced is None:
            raise MeasurementError(f"magnitude_unit = {magnitude_unit!r}: must be 'dB' or 'V/V'")
    raw = text.splitlines()
    first = next((ln for ln in raw if ln.strip() and not ln.lstrip().startswith("#")), None)
    if first is None:
        raise MeasurementError(f"{origin}: no header row and no data")
    delim = "\t" if ("\t" in first and "," not in first) else ","
    rows = []
    for number, line in enumerate(raw, start=1):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        cells = next(csv.reader([line], delimiter=delim))
        rows.append((number, cells))
    header_line, headers = rows[0]
    headers = [h.strip() for h in headers]
    if any(not h for h in headers):
        raise MeasurementError(f"{origin}, line {header_line}: empty column name in the header")
    data = rows[1:]
    if not data:
        raise MeasurementError(f"{origin}: header but no data rows")

    fi = _find_column(headers, frequency_column, lambda n, u: n in _FREQ_NAMES, "frequency",
                      "--frequency-column", origin)
    pi = None
    if use_phase:
        pi = _find_column(headers, phase_column,
                          lambda n, u: n in _PHASE_NAMES or (n == kind and u in _PHASE_UNITS),
                          "phase",
                          "--phase-column", origin, required=phase_column is not None,
                          exclude=(fi,))
    mi = _find_column(headers, magnitude_column,
                      lambda n, u: (n in _MAG_NAMES or n == kind) and u not in _PHASE_UNITS,
                      "magnitude",
                      "--magnitude-column", origin, exclude=(fi, pi))
    if len({fi, mi, pi} - {None}) != len([c for c in (fi, mi, pi) if c is not None]):
        raise MeasurementError(f"{origin}: one column chosen for two roles")

    _, f_unit = _split_header(headers[fi])
    f_scale = 1.0
    if f_unit:
        if f_unit not in _FREQ_SCALE:
            raise MeasurementError(f"{origin}: frequency column {headers[fi]!r}: unit {f_unit!r} "
                                   "not understood (Hz, kHz, MHz, GHz)")
        f_scale = _FREQ_SCALE[f_unit]
    _, m_unit_raw = _split_header(headers[mi])
    m_unit = _MAG_UNITS.get(m_unit_raw) if m_unit_raw else None
    if m_unit_raw and m_unit is None:
        raise MeasurementError(f"{origin}: magnitude column {headers[mi]!r}: unit "
                               f"{m_unit_raw!r} not understood (dB or V/V)")
    if forced and m_unit and forced != m_unit:
        raise MeasurementError(f"{origin}: mixed units: the header {headers[mi]!r} says "
                               f"{m_unit} but the magnitude unit was given as {forced}")
    m_unit = m_unit or forced
    unit_line = header_line if m_unit else None
    if pi is not None:
        _, p_unit = _split_header(headers[pi])
        if p_unit and p_unit not in _PHASE_UNITS:
            raise MeasurementError(f"{origin}: phase column {headers[pi]!r}: unit {p_unit!r} "
                                   "not understood (phase is in degrees)")

    f, mag, ph, lines = [], [], [], []
    width = len(headers)
    for number, cells in data:
        where = f"{origin}, line {number}"
        if len(cells) != width:
            raise MeasurementError(f"{where}: {len(cells)} fields, the header has {width}")
        fv, fu = _number(cells[fi], where, "frequency")
        if fu:
            from freqpair.design.quantities import parse_si
            try:
                fv = parse_si(cells[fi].strip(), field="", unit="hertz")
            except ValueError:
                raise MeasurementError(f"{where}: frequency = {cells[fi].strip()!r}: "
                                       "not a number or a frequency like '1.5 kHz'") from None
        else:
            fv *= f_scale
        if fv <= 0:
            raise MeasurementError(f"{where}: frequency = {cells[fi].strip()!r}: must be above 0 Hz")
        if f and fv <= f[-1]:
            raise MeasurementError(f"{where}: frequency = {cells[fi].strip()!r}: not above the "
                                   f"previous row's {f[-1]:g} Hz (rows must be sorted by "
                                   "increasing frequency, no repeats)")
        mv, mu = _number(cells[mi], where, "magnitude")
        if mu:
            cell_unit = _MAG_UNITS.get(mu.strip().lower().replace(" ", ""))
            if cell_unit is None:
                raise MeasurementError(f"{where}: magnitude = {cells[mi].strip()!r}: unit "
                                       f"{mu!r} not understood (dB or V/V)")
            if m_unit is not None and cell_unit != m_unit:
                said = (f"line {unit_line}" if unit_line else "the given unit")
                raise MeasurementError(f"{where}: mixed units: magnitude = "
                                       f"{cells[mi].strip()!r} is {cell_unit} but {said} "
                                       f"says {m_unit}")
            if m_unit is None:
                m_unit, unit_line = cell_unit, number
        elif unit_line is not None and unit_line != header_line and not forced:
            raise MeasurementError(f"{where}: mixed units: magnitude = {cells[mi].strip()!r} "
                                   f"has no unit but line {unit_line} gives {m_unit}")
        if m_unit == "V/V" and mv <= 0:
            raise MeasurementError(f"{where}: magnitude = {cells[mi].strip()!r}: a V/V "
                                   "magnitude must be above 0")
        mag.append(mv)
        if pi is not None:
            pv, pu = _number(cells[pi], where, "phase")
            if pu and pu.strip().lower() not in _PHASE_UNITS:
                raise MeasurementError(f"{where}: phase = {cells[pi].strip()!r}: phase is in "
                                       "degrees")
            ph.append(pv)
        f.append(fv)
        lines.append(number)
    if m_unit is None:
        raise MeasurementError(f"{origin}: magnitude unit unknown: write it in the header "
                               f"(e.g. '{headers[mi]} [dB]') or give --magnitude-unit dB|V/V")
    mag_db = np.asarray(mag, dtype=float)
    if m_unit == "V/V":
        mag_db = 20.0 * np.log10(mag_db)
    return Measurement(kind, np.asarray(f), mag_db, np.asarray(ph) if pi is not None else None,
                       origin, np.asarray(lines))


def read_measurement(path: str | os.PathLike, kind: str, **options) -> Measurement:
    """Read a measurement CSV file (options as :func:`parse_measurement_text`).

    Returns
    -------
    Measurement
        Frequencies [Hz], magnitude [dB], phase [deg] or None.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise MeasurementError(f"{path}: cannot read measurement file "
                               f"({exc.__class__.__name__}: "
                               f"{getattr(exc, 'strerror', None) or exc})") from None
    return parse_measurement_text(text, kind, origin=str(path), **options)


# ------------------------------------------------------------------ model
def model_response(responses, kind: str, f_hz) -> np.ndarray:
    """The model's complex value of a measured kind at ``f_hz`` [Hz].

    Parameters
    ----------
    responses : freqpair.analysis.responses.StageResponses
    kind : str
        One of :data:`KINDS`.
    f_hz : array_like
        Frequencies [Hz].

    Returns
    -------
    ndarray of complex
        Gain [V/V] (or CMRR as the complex ratio of the two gains).

    Raises
    ------
    MeasurementError
        The kind is not defined for this stage, or the model value is zero or
        infinite there (e.g. A_cm-dm of a perfectly matched pair).
    """
    from freqpair.analysis.responses import ZERO_GAIN_RATIO
    kind = normalize_kind(kind)
    r = responses.at(f_hz)
    need = {"adm": (responses.primary,), "adm_se": ("adm_se",), "acm_se": ("acm_se",),
            "acm_dm": ("acm_dm",), "cmrr": ("adm_se", "acm_se"),
            "cmrr_balanced": ("adm", "acm_dm")}[kind]
    parts = [r.get(n) for n in need]
    if any(p is None for p in parts):
        raise MeasurementError(f"kind = {kind!r}: not defined for this stage (a mirror load "
                               "has only the single-ended output)")
    ref = np.abs(r.adm if r.adm is not None else r.adm_se)
    for name, p in zip(need, parts):
        if np.any(np.abs(p) <= ZERO_GAIN_RATIO * ref):
            raise MeasurementError(f"kind = {kind!r}: the model's {name} is zero for this design "
                                   "(a perfectly matched stage?), so it cannot be compared")
    return parts[0] if len(parts) == 1 else parts[0] / parts[1]


@dataclass(frozen=True)
class Overlay:
    """A measurement beside the model at the measured frequencies.

    Residuals are measurement − model.

    Attributes
    ----------
    kind, label : str
    f_hz : ndarray
        Measured frequencies [Hz].
    measured_db, model_db, residual_db : ndarray
        Magnitudes and residual [dB].
    measured_deg, model_deg, residual_deg : ndarray or None
        Phases [deg] (model unwrapped along the measured frequencies; the
        residual wrapped to (−180, 180]); None without a measured phase
        (``model_deg`` is always given).
    rms_residual_db, max_abs_residual_db : float
        Root-mean-square and largest magnitude residual [dB].
    rms_residual_deg : float or None
        Root-mean-square phase residual [deg].
    """

    kind: str
    label: str
    f_hz: np.ndarray
    measured_db: np.ndarray
    model_db: np.ndarray
    residual_db: np.ndarray
    measured_deg: np.ndarray | None
    model_deg: np.ndarray
    residual_deg: np.ndarray | None
    rms_residual_db: float
    max_abs_residual_db: float
    rms_residual_deg: float | None

    def to_json(self) -> dict:
        """Plain dict (lists of floats; None without phase)."""
        lst = (lambda v: None if v is None else [float(x) for x in v])
        return {"kind": self.kind, "label": self.label, "frequency_hz": lst(self.f_hz),
                "measured_db": lst(self.measured_db), "model_db": lst(self.model_db),
                "residual_db": lst(self.residual_db), "measured_deg": lst(self.measured_deg),
                "model_deg": lst(self.model_deg), "residual_deg": lst(self.residual_deg),
                "rms_residual_db": float(self.rms_residual_db),
                "max_abs_residual_db": float(self.max_abs_residual_db),
                "rms_residual_deg": None if self.rms_residual_deg is None
                else float(self.rms_residual_deg)}


def overlay(analysis, measurement: Measurement) -> Overlay:
    """Evaluate the model at the measured frequencies and form the residual.

    Parameters
    ----------
    analysis : freqpair.analysis.result.Analysis
        (or anything with a ``responses`` attribute, a StageResponses)
    measurement : Measurement

    Returns
    -------
    Overlay
        Measured, model and residual magnitude [dB] and phase [deg].
    """
    h = model_response(analysis.responses, measurement.kind, measurement.f_hz)
    model_db = 20.0 * np.log10(np.abs(h))
    model_deg = np.degrees(np.unwrap(np.angle(h)))
    res_db = measurement.magnitude_db - model_db
    res_deg = rms_deg = None
    if measurement.phase_deg is not None:
        res_deg = wrap_deg(measurement.phase_deg - model_deg)
        rms_deg = float(np.sqrt(np.mean(res_deg ** 2)))
    return Overlay(measurement.kind, KINDS[measurement.kind], measurement.f_hz,
                   measurement.magnitude_db, model_db, res_db, measurement.phase_deg,
                   model_deg, res_deg, float(np.sqrt(np.mean(res_db ** 2))),
                   float(np.max(np.abs(res_db))), rms_deg)
