"""One call from a design to its numbers: :func:`analyze`."""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from freqpair.circuit.blas_threads import single_blas_thread
from freqpair.design.schema import Design
from freqpair.circuit.frequency import FrequencyGrid, s_of_hz
from freqpair.analysis.crossings import DB_3, db, lowest_crossing, search_grid
from freqpair.analysis.input_impedance import InputImpedance, input_impedance
from freqpair.analysis.responses import ZERO_GAIN_RATIO, ResponseSet, StageResponses
from freqpair.analysis.supply import SupplyRejection, single_ended_name, supply_rejection
from freqpair.circuit.stage import Stage, TailNorton, build_stage

__all__ = ["Analysis", "analyze"]


def _fin(v):
    return None if v is None or not math.isfinite(v) else float(v)


@dataclass(frozen=True)
class Analysis:
    """Exact small-signal results of one design (SI units, Hz at the edge).

    Attributes (null/None where infinite or undefined)
    ----------
    adm_db : float
        20·log10|A_dm(0)| of the primary gain (balanced; A_dm,se with a
        mirror load; A_total with a second stage — then see ``adm_db_first``).
    f3db_hz, ugf_hz : float or None
    acm_se_db, cmrr_se_db, cmrr_db : float or None
    cmrr_corner_hz : float or None
    supply : SupplyRejection
        PSRR± at DC and their corners (DESIGN.md §7f).
    input_impedance : InputImpedance
        |Z_in,dm|, |Z_in,cm| at DC and the DM corner (DESIGN.md §7g).
    """

    design: Design
    stage: Stage
    responses: StageResponses
    dc: ResponseSet
    primary: str
    adm_db: float | None
    adm_db_first: float | None
    a_total_db: float | None
    f3db_hz: float | None
    ugf_hz: float | None
    acm_se_db: float | None
    cmrr_se_db: float | None
    cmrr_db: float | None
    cmrr_textbook_db: float | None
    cmrr_corner_hz: float | None
    natural_frequencies_rad_s: np.ndarray = field(repr=False)
    _search: np.ndarray = field(repr=False)
    supply: SupplyRejection = None
    input_impedance: InputImpedance = None

    @property
    def beta_dc(self) -> float | None:
        """The feedback factor at DC: β_f, or R_g/(R_f + R_g) for a divider (None
        without ``[feedback]``)."""
        fb = self.design.feedback
        return None if fb is None else float(fb.factor)

    def noise(self):
        """Spot and band noise (:class:`freqpair.analysis.noise.NoiseResult`), computed
        on first use and kept."""
        cached = self.__dict__.get("_noise")
        if cached is None:
            from freqpair.analysis.noise import noise_analysis
            cached = noise_analysis(self.responses, self.design)
            object.__setattr__(self, "_noise", cached)
        return cached

    def cmrr_se_crossing_hz(self, level_db: float) -> float | None:
        """Lowest frequency [Hz] where the single-ended CMRR falls to ``level_db``.

        None when the CMRR is infinite or already at or below the level at DC.
        Bracketed on the search grid's values kept from :func:`analyze`, then
        root-found on direct solves of the two gains at o2 (the same path as
        the CMRR corner).
        """
        if self.cmrr_se_db is None or self.cmrr_se_db <= level_db:
            return None
        on_grid = self.__dict__.get("_cmrr_se_on_grid")
        return lowest_crossing(_cmrr_se_curve(self.responses), level_db, self._search, on_grid)

    @property
    def tail(self) -> TailNorton | None:
        return self.stage.tail

    @property
    def operating_point(self):
        return self.stage.operating_point

    def curves(self, grid: FrequencyGrid | None = None) -> ResponseSet:
        """All gains on ``grid`` (default: the design's sweep)."""
        grid = grid or FrequencyGrid.from_design(self.design)
        return self.responses.at(grid.f_hz)

    def __str__(self) -> str:
        """The terminal summary (:func:`freqpair.analysis.summary.format_summary`)."""
        from freqpair.analysis.summary import format_summary
        return format_summary(self)

    def _repr_html_(self) -> str:
        """A compact HTML table of the metrics, for notebooks."""
        from freqpair.analysis.summary import compact_html
        return compact_html(self)

    def to_json(self) -> dict:
        """The DESIGN.md §4 object (SI units; None for infinite/undefined)."""
        tail = self.tail.to_json() if self.tail is not None else {"resistance": None,
                                                                  "capacitance": None}
        out = {
            "name": self.design.name,
            "operating_point": self.operating_point.to_json(),
            "adm_db": _fin(self.adm_db_first if self.a_total_db is not None else self.adm_db),
            "f3db_hz": _fin(self.f3db_hz),
            "ugf_hz": _fin(self.ugf_hz),
            "acm_se_db": _fin(self.acm_se_db),
            "cmrr_se_db": _fin(self.cmrr_se_db),
            "cmrr_db": _fin(self.cmrr_db),
            "cmrr_corner_hz": _fin(self.cmrr_corner_hz),
            "cmrr_textbook_db": _fin(self.cmrr_textbook_db),
            "tail": tail,
        }
        if self.a_total_db is not None:
            out["a_total_db"] = _fin(self.a_total_db)
        out.update(self.supply.to_json())            # psrr_* (DESIGN.md §7f)
        out.update(self.input_impedance.to_json())   # zin_* (DESIGN.md §7g)
        out["beta_dc"] = _fin(self.beta_dc)          # DESIGN.md §7e
        out["noise"] = self.noise().to_json()        # DESIGN.md §7h
        from freqpair.analysis.hand import hand_json
        from freqpair.analysis.poles import pole_zero_json
        out.update(pole_zero_json(self))     # poles_hz, zeros_hz of the primary gain
        out["hand"] = hand_json(self)
        if self.design.feedback is not None:
            out.update(self._loop_json())
        return out

    def loop(self):
        """Loop results (:class:`freqpair.analysis.loop.LoopResult`), None without [feedback]."""
        from freqpair.analysis.loop import loop_analysis
        return loop_analysis(self)

    def _loop_json(self) -> dict:
        from freqpair.analysis.loop import LOOP_JSON_KEYS
        result = self.loop()
        if result is None:      # zero gain: no loop to speak of
            return {key: None for key in LOOP_JSON_KEYS}
        return result.to_json()


def _cmrr_se_curve(resp: StageResponses):
    """Single-ended CMRR [dB] at given frequencies [Hz] by direct solves of the two
    gains at o2 (the root-finding steps of the CMRR corner and target crossings)."""
    o2_row, _ = resp.output_row("adm_se")
    dm_cm = np.column_stack([resp.excitation("dm"), resp.excitation("cm")])

    def cmrr_db(f):
        h = np.array([resp.solver.transfer_at(complex(s), dm_cm, o2_row)
                      for s in s_of_hz(np.atleast_1d(f))])      # (n_f, 2)
        return db(h[:, 0]) - db(h[:, 1])
    return cmrr_db


def _gain_db(value: complex, reference: float) -> float | None:
    """dB of a DC gain, None when it is zero to rounding (DESIGN.md §2)."""
    mag = abs(value)
    if mag <= ZERO_GAIN_RATIO * reference:
        return None
    return 20.0 * math.log10(mag)


def _low_zeros(resp: StageResponses, names, poles: np.ndarray) -> np.ndarray:
    """Zeros [rad/s] of the named gains below the slowest natural frequency.

    The crossings' search grid starts 3 decades below its lowest root: a CMRR
    corner is set by a zero of A_cm,se (the tail's R·C), which may lie far below
    every pole, and must not depend on where the user's sweep starts.
    """
    mags = np.abs(poles)
    slowest = mags[mags > 0].min() if np.any(mags > 0) else np.inf
    found = []
    for name in dict.fromkeys(names):
        row, kind = resp.output_row(name)
        z = resp.solver.zeros(resp.excitation(kind), row)
        found.append(z[(np.abs(z) > 0) & (np.abs(z) < slowest)])
    return np.concatenate(found) if found else np.zeros(0, dtype=complex)


def analyze(design: Design) -> Analysis:
    """Analyse a design: bias, exact network, DC gains, f_3dB, UGF, CMRR and corner.

    Parameters
    ----------
    design : Design

    Returns
    -------
    Analysis

    Raises
    ------
    BiasError, NetworkError
        With one-line messages.
    """
    with single_blas_thread():          # tiny matrices: BLAS worker threads only cost
        return _analyze(design)


def _analyze(design: Design) -> Analysis:
    stage = build_stage(design)
    resp = StageResponses(stage)
    dc = resp.dc()
    primary = resp.primary
    a0 = complex(dc.get(primary)[0])
    ref = abs(complex(dc.adm[0])) if dc.adm is not None else abs(complex(dc.adm_se[0]))
    # DESIGN.md §3a: with a second stage, adm_db is the first stage's gain at o2
    first = dc.adm if (stage.balanced and stage.final_node == "o2") else dc.adm_se
    adm_db_first = _gain_db(complex(first[0]), ref) if ref > 0 else None
    adm_db = _gain_db(a0, abs(a0)) if abs(a0) > 0 else None
    a_total_db = adm_db if primary == "a_total" else None

    poles = resp.solver.poles()
    acm_se0 = complex(dc.acm_se[0])
    names = [primary] + (["adm_se", "acm_se"] if abs(acm_se0) > ZERO_GAIN_RATIO * ref else [])
    se0 = abs(complex(dc.get(single_ended_name(resp))[0]))
    names += [r for r in ("a_vpos", "a_vneg")
              if abs(complex(dc.get(r)[0])) > ZERO_GAIN_RATIO * se0]
    grid = search_grid(np.concatenate([poles, _low_zeros(resp, names, poles)]),
                       design.sweep.start, design.sweep.stop)
    # a bracketing scan (the crossings are root-found on direct solves): the signal
    # inputs only (the rails are bracketed apart), without the refinement step
    on_grid = resp.at(grid, signal_only=True, refine=False)

    def curve(name):
        # root-finding steps: one direct solve for this gain alone (a third of the
        # cost of all gains through StageResponses.at; same LU, same numbers)
        row, kind = resp.output_row(name)
        b = resp.excitation(kind)
        solver = resp.solver
        return lambda f: db(np.array([solver.transfer_at(complex(s), b, row)
                                      for s in s_of_hz(np.atleast_1d(f))]))

    f3db = ugf = None
    if adm_db is not None:
        f3db = lowest_crossing(curve(primary), adm_db - DB_3, grid, db(on_grid.get(primary)))
        if abs(a0) > 1:
            ugf = lowest_crossing(curve(primary), 0.0, grid, db(on_grid.get(primary)))

    acm_se_db = _gain_db(complex(dc.acm_se[0]), ref)
    se_ref = abs(complex(dc.adm_se[0]))
    cmrr_se_db = None
    corner = None
    if acm_se_db is not None and se_ref > 0:
        cmrr_se_db = 20 * math.log10(se_ref) - acm_se_db

        corner = lowest_crossing(_cmrr_se_curve(resp), cmrr_se_db - DB_3, grid,
                                 db(on_grid.adm_se) - db(on_grid.acm_se))
    cmrr_db = cmrr_textbook_db = None
    if stage.balanced:
        acm_dm_db = _gain_db(complex(dc.acm_dm[0]), ref)
        if acm_dm_db is not None:
            cmrr_db = 20 * math.log10(ref) - acm_dm_db
        acm_cm_db = _gain_db(complex(dc.acm_cm[0]), ref)
        if acm_cm_db is not None:
            cmrr_textbook_db = 20 * math.log10(ref) - acm_cm_db
    out = Analysis(design, stage, resp, dc, primary, adm_db, adm_db_first, a_total_db, f3db,
                   ugf, acm_se_db, cmrr_se_db, cmrr_db, cmrr_textbook_db, corner, poles, grid,
                   supply_rejection(resp, grid, on_grid), input_impedance(resp, grid, on_grid))
    if cmrr_se_db is not None:      # kept for cmrr_se_crossing_hz (a target's crossing)
        object.__setattr__(out, "_cmrr_se_on_grid", db(on_grid.adm_se) - db(on_grid.acm_se))
    return out
