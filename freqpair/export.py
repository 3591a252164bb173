"""CSV export of the curves: frequency, magnitude [dB] and phase [deg] of every gain, and CMRR."""
from __future__ import annotations

import csv
import io

import numpy as np

from .design import atomic_write_text
from .metrics import db

__all__ = ["curves_table", "write_curves_csv"]


def curves_table(result, grid=None) -> dict[str, np.ndarray]:
    """Columns of the curves (dict of equal-length arrays), phase unwrapped."""
    r = result.curves(grid)
    cols = {"frequency_hz": r.f_hz}
    for name in ("adm", "adm_se", "acm_se", "acm_dm", "acm_cm", "a_total", "acm_total"):
        v = r.get(name)
        if v is None:
            continue
        cols[f"{name}_db"] = db(v)
        cols[f"{name}_deg"] = np.degrees(np.unwrap(np.angle(v)))
    cols["cmrr_se_db"] = db(r.adm_se) - db(r.acm_se)
    if r.adm is not None:
        cols["cmrr_db"] = db(r.adm) - db(r.acm_dm)
    return cols


def write_curves_csv(result, path, grid=None) -> None:
    """Write :func:`curves_table` to ``path`` atomically. Infinite dB values
    (a gain exactly zero) are written as empty cells."""
    cols = curves_table(result, grid)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(cols))
    for row in zip(*cols.values()):
        w.writerow(["" if not np.isfinite(v) else repr(float(v)) for v in row])
    atomic_write_text(path, buf.getvalue())
