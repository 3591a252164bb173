"""The stage's gains as functions of frequency (DESIGN.md §2, §7f excitations and outputs).

The network's inputs are the sources ``in1``, ``in2``, ``vpos``, ``vneg`` (in that
order). Excitations: differential ``v_id = v_in1 − v_in2`` (in1 = +½, in2 = −½),
common mode ``v_ic`` (in1 = in2 = 1), and each rail alone (``vpos`` = 1 or
``vneg`` = 1, the inputs at 0). Outputs: balanced ``v_o1 − v_o2``,
single-ended ``v_o2``, and the second stage's ``out`` when present.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from freqpair.circuit.frequency import s_of_hz
from freqpair.circuit.stage import Stage

__all__ = ["StageResponses", "ResponseSet", "RESPONSE_NAMES", "GAIN_NAMES", "RAIL_NAMES",
           "ZERO_GAIN_RATIO", "EXCITATIONS"]

#: A gain below this fraction of |A_dm(0)| is exactly zero (DESIGN.md §2).
ZERO_GAIN_RATIO = 1e-12

RESPONSE_NAMES = {
    "adm": "differential gain A_dm = v_od/v_id",
    "adm_se": "single-ended differential gain A_dm,se = v_o2/v_id",
    "acm_se": "single-ended common-mode gain A_cm,se = v_o2/v_ic",
    "acm_dm": "common-mode to differential gain A_cm-dm = v_od/v_ic",
    "acm_cm": "common-mode to common-mode gain A_cm-cm = (v_o1+v_o2)/2/v_ic",
    "a_total": "overall gain A_total = v_out/v_id (with second stage)",
    "acm_total": "common-mode gain to the second-stage output v_out/v_ic",
    "a_vpos": "positive-rail gain A_vpos = v_so/v_vpos (single-ended output)",
    "a_vneg": "negative-rail gain A_vneg = v_so/v_vneg (single-ended output)",
}

#: The gains of an input signal (DESIGN.md §2), apart from the rails' gains (§7f).
GAIN_NAMES = ("adm", "adm_se", "acm_se", "acm_dm", "acm_cm", "a_total", "acm_total")
RAIL_NAMES = ("a_vpos", "a_vneg")

#: Input combinations (columns: in1, in2, vpos, vneg) of each excitation.
EXCITATIONS = {
    "dm": np.array([0.5, -0.5, 0.0, 0.0]),
    "cm": np.array([1.0, 1.0, 0.0, 0.0]),
    "vpos": np.array([0.0, 0.0, 1.0, 0.0]),
    "vneg": np.array([0.0, 0.0, 0.0, 1.0]),
}
_B_DM = EXCITATIONS["dm"]
_B_CM = EXCITATIONS["cm"]


@dataclass(frozen=True)
class ResponseSet:
    """Complex gains at a set of frequencies (each an array over frequency).

    ``adm``, ``acm_dm`` and ``acm_cm`` are None without a balanced output;
    ``a_total``, ``acm_total`` are None without a second stage. ``a_vpos`` and
    ``a_vneg`` are the rails' gains to the single-ended output (o2, or ``out``).
    ``zin_dm`` and ``zin_cm`` are the input impedances [Ω] (DESIGN.md §7g):
    (v_b1 − v_b2)/i_1 under the DM drive and v̄_b/(i_1 + i_2) under the CM
    drive, i_k the current from R_s into node b_k (complex; infinite where no
    current flows, e.g. into a MOS gate at DC).
    """

    f_hz: np.ndarray
    adm: np.ndarray | None
    adm_se: np.ndarray
    acm_se: np.ndarray
    acm_dm: np.ndarray | None
    acm_cm: np.ndarray | None
    a_total: np.ndarray | None
    acm_total: np.ndarray | None
    a_vpos: np.ndarray | None = None
    a_vneg: np.ndarray | None = None
    zin_dm: np.ndarray | None = None
    zin_cm: np.ndarray | None = None

    def get(self, name: str) -> np.ndarray | None:
        return getattr(self, name)


class StageResponses:
    """Evaluates the stage's gains on any frequencies, reusing one pencil reduction.

    Parameters
    ----------
    stage : Stage
    """

    def __init__(self, stage: Stage):
        self.stage = stage
        net = stage.network
        rows = {"o1": net.selector({"o1": 1.0}), "o2": net.selector({"o2": 1.0})}
        if stage.final_node != "o2":
            rows["out"] = net.selector({stage.final_node: 1.0})
        rows.update(self._input_rows())
        #: output row name → index in the solver's outputs
        self.rows = {name: i for i, name in enumerate(rows)}
        self.solver = net.solver(np.array(list(rows.values())))
        self._dc: ResponseSet | None = None
        self._parts: dict = {}

    def _input_rows(self) -> dict:
        """Rows for the input impedance: v_b1, v_b2 and the currents i_1, i_2 from
        R_s into b_1, b_2: the input source's own current (it flows through R_s
        into b_k), or (v_in − v_b)/R_s where an added element also draws from
        node in_k."""
        net = self.stage.network
        nodes = self.stage.nodes
        design = self.stage.design
        rows = {}
        rs = design.source.resistance
        n_nodes = len(net.node_names)
        for k in (1, 2):
            b = nodes[f"b{k}"]
            rows[f"vb{k}"] = net.selector({b: 1.0})
            shared = any(f"in{k}" in el.nodes for el in design.element)
            if rs > 0 and shared:
                rows[f"i{k}"] = net.selector({f"in{k}": 1.0 / rs, b: -1.0 / rs})
            else:
                row = np.zeros(net.size)
                row[n_nodes + net.input_names.index(f"in{k}")] = -1.0   # into the circuit
                rows[f"i{k}"] = row
        return rows

    @property
    def primary(self) -> str:
        """Name of the gain the stage's A_dm, f_3dB, UGF and loop use."""
        if self.stage.final_node != "o2":
            return "a_total"
        return "adm" if self.stage.balanced else "adm_se"

    def _assemble(self, f_hz, H, part: str = "all") -> ResponseSet:
        so = self.rows["out"] if "out" in self.rows else self.rows["o2"]
        if part == "rails":                     # columns vpos, vneg only (see ``at``)
            return ResponseSet(np.asarray(f_hz, dtype=float), None, None, None, None, None,
                               None, None, H[:, so, 0], H[:, so, 1])
        if part == "signal":                    # columns in1, in2 only
            H = np.concatenate([H, np.zeros(H.shape[:2] + (2,), dtype=complex)], axis=2)
        dm = H @ _B_DM          # (n_f, p)
        cm = H @ _B_CM
        r = self.rows
        o1, o2 = r["o1"], r["o2"]
        bal = self.stage.balanced
        total = "out" in r
        so = r["out"] if total else o2          # the single-ended output's row
        with np.errstate(divide="ignore", invalid="ignore"):
            zin_dm = (dm[:, r["vb1"]] - dm[:, r["vb2"]]) / dm[:, r["i1"]]
            zin_cm = 0.5 * (cm[:, r["vb1"]] + cm[:, r["vb2"]]) / (cm[:, r["i1"]] + cm[:, r["i2"]])
        zin_dm = np.where(np.isfinite(zin_dm), zin_dm, np.inf)
        zin_cm = np.where(np.isfinite(zin_cm), zin_cm, np.inf)
        return ResponseSet(
            f_hz=np.asarray(f_hz, dtype=float),
            adm=(dm[:, o1] - dm[:, o2]) if bal else None,
            adm_se=dm[:, o2],
            acm_se=cm[:, o2],
            acm_dm=(cm[:, o1] - cm[:, o2]) if bal else None,
            acm_cm=(0.5 * (cm[:, o1] + cm[:, o2])) if bal else None,
            a_total=dm[:, so] if total else None,
            acm_total=cm[:, so] if total else None,
            a_vpos=H[:, so, 2] if part == "all" else None,
            a_vneg=H[:, so, 3] if part == "all" else None,
            zin_dm=zin_dm,
            zin_cm=zin_cm,
        )

    def at(self, f_hz, rails_only: bool = False, signal_only: bool = False,
           refine: bool = True) -> ResponseSet:
        """All gains at frequencies ``f_hz`` [Hz] (batched over frequency).

        With ``rails_only`` only the rails' gains ``a_vpos``, ``a_vneg`` are
        solved (the other fields are None); with ``signal_only`` everything but
        them (``a_vpos``, ``a_vneg`` None): each half the work of a full sweep.
        ``refine=False`` skips the solver's refinement step (for bracketing
        scans: see :meth:`~freqpair.circuit.network.FrequencySolver.response`).
        """
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
        if rails_only or signal_only:
            cols, part = ([2, 3], "rails") if rails_only else ([0, 1], "signal")
            sub = self._parts.get(part)
            if sub is None:
                sub = self._parts[part] = self.solver.with_inputs(cols)
            return self._assemble(f, sub.response(s_of_hz(f), refine), part)
        return self._assemble(f, self.solver.response(s_of_hz(f), refine))

    def dc(self) -> ResponseSet:
        """All gains at s = 0 exactly (direct solve of G)."""
        if self._dc is None:
            H = self.solver.dc()[None, :, :]
            self._dc = self._assemble(np.zeros(1), H)
        return self._dc

    def gain(self, name: str, f_hz) -> np.ndarray:
        """One named gain at ``f_hz`` [Hz] (complex array)."""
        value = self.at(f_hz).get(name)
        if value is None:
            raise KeyError(f"{name}: not defined for this stage")
        return value

    def excitation(self, kind: str) -> np.ndarray:
        """Network input vector b for the 'dm', 'cm', 'vpos' or 'vneg' excitation."""
        return self.solver.B @ EXCITATIONS[kind]

    def output_row(self, name: str) -> tuple[np.ndarray, str]:
        """Output row l and the excitation kind for a named gain."""
        net = self.stage.network
        rows = {
            "adm": ({"o1": 1.0, "o2": -1.0}, "dm"),
            "adm_se": ({"o2": 1.0}, "dm"),
            "acm_se": ({"o2": 1.0}, "cm"),
            "acm_dm": ({"o1": 1.0, "o2": -1.0}, "cm"),
            "acm_cm": ({"o1": 0.5, "o2": 0.5}, "cm"),
            "a_total": ({self.stage.final_node: 1.0}, "dm"),
            "acm_total": ({self.stage.final_node: 1.0}, "cm"),
            "a_vpos": ({self.stage.final_node: 1.0}, "vpos"),
            "a_vneg": ({self.stage.final_node: 1.0}, "vneg"),
        }
        combo, kind = rows[name]
        return net.selector(combo), kind
