"""SI quantities: parse "10 kΩ" / "2 pF" / 1.5e-12, and format in engineering notation.

Parsing is delegated to :mod:`quantiphy`; this module adds the unit check
(a string's unit must be one the field accepts, so "1 meg" is refused rather
than read as 1 milli-"eg") and the one-line errors.
"""
from __future__ import annotations

import math

__all__ = ["parse_si", "format_si"]

# Unit spellings accepted per physical kind (empty string = bare number).
UNIT_ALIASES: dict[str, set[str]] = {
    "ohm": {"", "Ω", "Ohm", "ohm", "Ohms", "ohms", "R"},
    "farad": {"", "F"},
    "ampere": {"", "A"},
    "volt": {"", "V"},
    "second": {"", "s"},
    "hertz": {"", "Hz"},
    "kelvin": {"", "K"},
    "metre": {"", "m"},
    "siemens": {"", "S", "A/V"},
    "transconductance_param": {"", "A/V2", "A/V^2", "A/V²"},
    "cap_per_area": {"", "F/m2", "F/m^2", "F/m²"},
    "cap_per_length": {"", "F/m"},
    "per_volt": {"", "1/V", "/V"},
    "sqrt_volt": {"", "V^0.5", "V^(1/2)", "√V", "sqrt(V)"},
    "none": {""},
}


def parse_si(value, *, field: str, unit: str = "none") -> float:
    """Parse a plain number or an SI string into a float.

    Parameters
    ----------
    value : int, float or str
        ``1e-12``, ``"2 pF"``, ``"10kΩ"``, ``"1.5e-12"``. ``"M"`` is mega,
        ``"m"`` milli (SI prefixes only).
    field : str
        Dotted key for the error message, e.g. ``"tail.capacitance"``.
    unit : str
        Kind of unit the string may carry, a key of ``UNIT_ALIASES``.

    Returns
    -------
    float
        The value in SI base units.

    Raises
    ------
    ValueError
        One line naming the field and the value.
    """
    lead = f"{field} = {value!r}: " if field else ""
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise ValueError(f"{lead}expected a number or a string like '2 pF'")
    if isinstance(value, str):
        text = value.strip()
        if "," in text:
            # a decimal comma ("1,5 k") would be read as a thousands separator (15 k)
            raise ValueError(f"{lead}use a decimal point, not a comma")
        from quantiphy import Quantity     # imported when a string needs it
        try:
            if unit == "kelvin":   # quantiphy reads a lone "K" as kilo: "300 K" is 300 kelvin
                with Quantity.prefs(input_sf=Quantity.get_pref("input_sf").replace("K", "")):
                    q = Quantity(text)
            else:
                q = Quantity(text)
        except Exception:
            raise ValueError(f"{lead}not a number with an SI prefix") from None
        allowed = UNIT_ALIASES.get(unit, {""})
        if q.units not in allowed:
            shown = ", ".join(repr(u) for u in sorted(allowed) if u) or "no unit"
            raise ValueError(f"{lead}unit {q.units!r} not understood here "
                             f"(expected {shown}; prefixes are SI: M mega, m milli)")
        number = float(q)
    else:
        number = float(value)
    if not math.isfinite(number):
        raise ValueError(f"{lead}must be finite")
    return number


_PREFIXES = {-18: "a", -15: "f", -12: "p", -9: "n", -6: "µ", -3: "m", 0: "",
             3: "k", 6: "M", 9: "G", 12: "T", 15: "P"}


def format_si(value, unit: str = "", digits: int = 4) -> str:
    """Format a number in engineering notation: ``format_si(2.2e-12, 'F') -> '2.2 pF'``.

    Parameters
    ----------
    value : float or None
        ``None`` and infinities format as ``'—'`` / ``'∞'``.
    unit : str
        Unit symbol appended after the prefix.
    digits : int
        Significant digits.

    Returns
    -------
    str
    """
    if value is None:
        return "—"
    value = float(value)
    if math.isnan(value):
        return "—"
    if math.isinf(value):
        return ("-∞" if value < 0 else "∞") + (f" {unit}" if unit else "")
    if value == 0:
        return f"0 {unit}".rstrip()
    exp3 = int(math.floor(math.log10(abs(value)) / 3) * 3)
    exp3 = max(min(exp3, 15), -18)
    mant = value / 10.0**exp3
    text = f"{mant:.{digits}g}"
    # rounding can carry to 1000
    if abs(float(text)) >= 1000 and exp3 < 15:
        exp3 += 3
        text = f"{value / 10.0**exp3:.{digits}g}"
    return f"{text} {_PREFIXES[exp3]}{unit}".rstrip()
