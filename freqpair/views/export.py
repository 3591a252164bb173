"""CSV export of the curves: frequency; magnitude [dB] and phase [deg] of every
gain and of the rails' gains; CMRR and PSRR± [dB]; |Z_in,dm|, |Z_in,cm| [Ω] and
their phase [deg]; input-referred and output noise densities [V/√Hz]."""
from __future__ import annotations

import numpy as np

from freqpair.design.files import atomic_write_text, csv_text
from freqpair.analysis.crossings import db

__all__ = ["curves_table", "write_curves_csv", "zero_to_rounding"]


def zero_to_rounding(result, values) -> np.ndarray:
    """True where a gain is zero to rounding: |value| ≤ 1e-12·|A_dm(0)|
    (DESIGN.md §2; e.g. A_cm-dm of a perfectly matched pair at every frequency)."""
    from freqpair.analysis.responses import ZERO_GAIN_RATIO
    dc = result.dc
    ref = abs(complex((dc.adm if dc.adm is not None else dc.adm_se)[0]))
    return np.abs(values) <= ZERO_GAIN_RATIO * ref


def curves_table(result, grid=None) -> dict[str, np.ndarray]:
    """Columns of the curves (dict of equal-length arrays), phase unwrapped.

    A gain that is zero to rounding at a frequency has −inf dB and NaN phase
    there (written as empty cells), and the CMRR it divides is +inf (empty).
    """
    r = result.curves(grid)
    cols = {"frequency_hz": r.f_hz}
    for name in ("adm", "adm_se", "acm_se", "acm_dm", "acm_cm", "a_total", "acm_total"):
        v = r.get(name)
        if v is None:
            continue
        zero = zero_to_rounding(result, v)
        cols[f"{name}_db"] = np.where(zero, -np.inf, db(v))
        cols[f"{name}_deg"] = np.where(zero, np.nan, np.degrees(np.unwrap(np.angle(v))))
    cols["cmrr_se_db"] = cols["adm_se_db"] - cols["acm_se_db"]
    if r.adm is not None:
        cols["cmrr_db"] = cols["adm_db"] - cols["acm_dm_db"]
    # supply rejection at the single-ended output (DESIGN.md §7f)
    from freqpair.analysis.supply import psrr_db, single_ended_name
    se = single_ended_name(result.responses)
    for rail, sign in (("vpos", "pos"), ("vneg", "neg")):
        v = r.get(f"a_{rail}")
        zero = zero_to_rounding(result, v)
        cols[f"a_{rail}_db"] = np.where(zero, -np.inf, db(v))
        cols[f"a_{rail}_deg"] = np.where(zero, np.nan, np.degrees(np.unwrap(np.angle(v))))
        cols[f"psrr_{sign}_db"] = np.where(zero, np.inf, psrr_db(r, rail, se))
    # input impedance (DESIGN.md §7g): |Z| [Ω] and phase [deg]; infinite → empty
    for name in ("zin_dm", "zin_cm"):
        z = r.get(name)
        mag = np.abs(z)
        big = ~np.isfinite(mag) | (mag > 1e15)
        cols[f"{name}_ohm"] = np.where(big, np.inf, mag)
        cols[f"{name}_deg"] = np.where(big, np.nan, np.degrees(np.angle(z)))
    # noise densities (DESIGN.md §7h)
    from freqpair.analysis.noise import noise_curves
    f = np.asarray(r.f_hz, dtype=float)
    ok = f > 0
    en = np.full(f.shape, np.nan)
    out = np.full(f.shape, np.nan)
    if np.any(ok):
        nc = noise_curves(result.responses, f[ok])
        en[ok] = nc.input_v_rthz
        out[ok] = nc.output_v_rthz
    cols["input_noise_v_rthz"] = en
    cols["output_noise_v_rthz"] = out
    return cols


def write_curves_csv(result, path, grid=None) -> None:
    """Write :func:`curves_table` to ``path`` atomically. Infinite dB values
    (a gain exactly zero) are written as empty cells."""
    cols = curves_table(result, grid)
    atomic_write_text(path, csv_text(cols, zip(*cols.values())))
