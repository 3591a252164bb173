"""Sidebar controls for the second-edition stage: cascode, added elements, loop kind.

The first half holds plain design edits (no Bokeh), each returning a new,
validated :class:`~freqpair.design.schema.Design` or raising a one-line
:class:`~freqpair.design.errors.DesignError`:

- :func:`with_cascode` adds a cascode to the pair (DESIGN.md §7c; freqpair's
  defaults, see there) or removes ``[pair.cascode]``;
- :func:`with_element` / :func:`without_element` add or remove one
  ``[[element]]`` (§7d);
- :func:`switch_feedback` makes the loop a fixed factor, a divider (§7e) or none.

:class:`StructureControls` builds the widgets the explorer puts into its
"Pair", "Loop" and "More" tabs; every change goes through the explorer's own
apply path (:meth:`freqpair.app.view.Explorer.apply_structure`), so a refused
change keeps the last good design on screen.
"""
from __future__ import annotations

from freqpair.design.errors import DesignError, FreqpairError
from freqpair.design.schema import design_to_dict, parse_design, stage_nodes
from freqpair.design.quantities import format_si

__all__ = ["with_cascode", "cascode_defaults", "with_element", "without_element",
           "switch_feedback", "structure_key", "StructureControls", "ELEMENT_KINDS",
           "FEEDBACK_KINDS", "DIVIDER_SHUNT_OHM", "DEFAULT_FACTOR"]

#: Kinds of an added element (DESIGN.md §7d) and the unit of each one's value.
ELEMENT_KINDS = {"resistor": "Ω", "capacitor": "F", "transconductance": "S"}
#: Loop kinds the explorer offers: no loop, a fixed factor β_f (§2), a divider (§7e).
FEEDBACK_KINDS = ("none", "factor", "divider")
#: R_g of a divider made from a factor (R_f follows from β) [Ω].
DIVIDER_SHUNT_OHM = 10e3
#: β_f of a loop added where there was none (a closed-loop gain of ten).
DEFAULT_FACTOR = 0.1

_PAIR_ONLY = ("degeneration", "cascode", "type")


# ------------------------------------------------------------------ design edits
def structure_key(design) -> tuple:
    """What decides which controls the sidebar has: loop kind, second stage, cascode,
    degeneration on/off (the nodes e1, e2) and the added elements (kind, nodes, name)."""
    fb = design.feedback.type if design.feedback is not None else None
    elements = tuple((el.kind, tuple(el.nodes), el.name) for el in design.element)
    return (fb, design.second_stage is not None, design.pair.cascode is not None,
            design.pair.degeneration > 0, elements)


def cascode_defaults(design) -> dict:
    """The ``[pair.cascode]`` table the explorer adds (DESIGN.md §7c).

    The cascode devices copy the pair device's keys (same type; degeneration
    aside); ``bias`` puts the node ``c`` halfway between the pair device's
    emitter/source and the output node of the design without a cascode, so
    the pair device and the cascode share the headroom, rounded to 10 mV:
    bias = (V_E + V_O)/2 + V_BE (npn; V_GS for MOS at the device's I_D; signs
    swapped for pnp/pmos); unrounded where the rounding would cost a device its
    headroom.

    Raises
    ------
    FreqpairError
        The design without a cascode has no valid operating point.
    """
    from freqpair.circuit.bias import pair_operating_point, polarity
    from freqpair.circuit.devices import mos_overdrive
    data = design_to_dict(design)
    pair = data["pair"]
    plain = dict(data)
    plain["pair"] = {k: v for k, v in pair.items() if k != "cascode"}
    base = parse_design(plain)
    op = pair_operating_point(base)
    dev = base.pair
    current = op.small_signal.current
    drop = dev.vbe if dev.is_bipolar else dev.threshold + mos_overdrive(dev, current)
    v_c = 0.5 * (op.v_emitter + op.v_output)
    casc = {k: v for k, v in pair.items() if k not in _PAIR_ONLY}
    casc["type"] = dev.type
    exact = v_c + polarity(dev) * drop
    casc["bias"] = round(exact, 2)
    trial = dict(data)
    trial["pair"] = dict(pair, cascode=casc)
    try:                 # where the headroom is tight, 10 mV of rounding can cost it
        pair_operating_point(parse_design(trial))
    except FreqpairError:
        casc["bias"] = exact
    return casc


def with_cascode(design, present: bool):
    """A copy of ``design`` with a cascoded pair (``present``) or without one.

    An added cascode takes :func:`cascode_defaults`; a design that already has
    (or lacks) one is returned unchanged.

    Raises
    ------
    FreqpairError
        One line (e.g. the defaults leave a device without headroom).
    """
    if (design.pair.cascode is not None) == bool(present):
        return design
    data = design_to_dict(design)
    if present:
        data["pair"]["cascode"] = cascode_defaults(design)
    else:
        data["pair"].pop("cascode", None)
    return parse_design(data)


def with_element(design, kind: str, nodes, value, name: str | None = None,
                 control=None):
    """A copy of ``design`` with one more ``[[element]]`` (DESIGN.md §7d).

    Parameters
    ----------
    kind : {"resistor", "capacitor", "transconductance"}
    nodes : (str, str)
        The two nodes it joins (names from :func:`freqpair.design.schema.stage_nodes`).
    value : str or float
        Ω, F or S; SI text such as ``"150 fF"``.
    name : str, optional
        Shown where contributors are listed; empty means none.
    control : (str, str), optional
        The controlling nodes of a transconductance.

    Raises
    ------
    DesignError
        One line naming the key (``element.N....``) and the value.
    """
    if kind not in ELEMENT_KINDS:
        raise DesignError(f"element kind = {kind!r}: must be one of "
                          f"{', '.join(ELEMENT_KINDS)}")
    value = value.strip() if isinstance(value, str) else value
    if value == "":
        raise DesignError(f"element.{len(design.element)}.value = '': give a value "
                          f"(e.g. 150 fF)")
    item = {"kind": kind, "nodes": list(nodes), "value": value}
    if name is not None and str(name).strip():
        item["name"] = str(name).strip()
    if kind == "transconductance":
        item["control"] = list(control) if control is not None else ["o1", "ground"]
    data = design_to_dict(design)
    data.setdefault("element", []).append(item)
    return parse_design(data)


def without_element(design, index: int):
    """A copy of ``design`` without its ``index``-th added element (from 0).

    Raises
    ------
    DesignError
        No such element.
    """
    data = design_to_dict(design)
    items = data.get("element", [])
    if not 0 <= index < len(items):
        raise DesignError(f"element.{index}: no such element ({len(items)} added)")
    items.pop(index)
    if not items:
        data.pop("element", None)
    return parse_design(data)


def switch_feedback(design, kind: str):
    """A copy of ``design`` whose loop is ``kind``: "none", "factor" or "divider".

    A divider made from a factor β keeps β at DC: R_g = :data:`DIVIDER_SHUNT_OHM`,
    R_f = R_g·(1 − β)/β, no capacitors; a factor made from a divider takes its
    DC value R_g/(R_f + R_g); a loop added where there was none starts at
    β = :data:`DEFAULT_FACTOR` (a divider 90 k over 10 k).

    Raises
    ------
    DesignError
        Unknown kind, or a factor of 1 or more made a divider (one line).
    """
    if kind not in FEEDBACK_KINDS:
        raise DesignError(f"feedback.type = {kind!r}: must be one of "
                          f"{', '.join(FEEDBACK_KINDS)}")
    now = design.feedback.type if design.feedback is not None else "none"
    if kind == now:
        return design
    data = design_to_dict(design)
    beta = design.feedback.factor if design.feedback is not None else DEFAULT_FACTOR
    if kind == "none":
        data.pop("feedback", None)
    elif kind == "factor":
        data["feedback"] = {"type": "factor", "factor": float(f"{beta:.6g}")}
    else:
        if not 0 < beta < 1:
            raise DesignError(f"feedback.factor = {beta:g}: a divider gives β below 1 — "
                              "set a smaller factor first")
        r_g = DIVIDER_SHUNT_OHM
        data["feedback"] = {"type": "divider",
                            "series_resistance": float(f"{r_g * (1 - beta) / beta:.6g}"),
                            "series_capacitance": 0.0, "shunt_resistance": r_g,
                            "shunt_capacitance": 0.0}
    return parse_design(data)


# ------------------------------------------------------------------ widgets
_ROW_PX = 28
_MARGIN = (1, 4, 1, 4)
_WORDS = {"none": "no loop", "factor": "fixed factor β_f", "divider": "divider R_f, R_g"}


def _html(text: str) -> str:
    return str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def element_label(el) -> str:
    """Short words for one added element: ``"capacitor t–ground (tail wiring)"``."""
    words = f"{el.kind} {el.nodes[0]}–{el.nodes[1]}"
    if el.kind == "transconductance":
        words += f" ctl {el.control[0]}–{el.control[1]}"
    return words + (f" ({el.name})" if el.name else "")


class StructureControls:
    """The cascode choice (Pair tab), the loop kind (Loop tab) and the element list
    (More tab) of one explorer session.

    Parameters
    ----------
    explorer : freqpair.app.view.Explorer
        Its :meth:`~freqpair.app.view.Explorer.apply_structure` takes each new
        design (or the error that refused it), :meth:`~freqpair.app.view.Explorer.edit`
        each element value typed.
    """

    def __init__(self, explorer):
        self.explorer = explorer

    # ------------------------------------------------------------- pair
    def pair_rows(self, rows, width: int) -> list:
        """The Pair tab: the cascode choice, then the pair device's rows and (when
        cascoded, behind a switch on the same line, so the tab fits the screen) the
        cascode's rows. A degeneration of 0 is none (DESIGN.md §7a)."""
        from bokeh.layouts import column, row
        from bokeh.models import Div, RadioButtonGroup, Select
        design = self.explorer.design
        has = design.pair.cascode is not None
        if getattr(self, "_cascode_line", None) is None:    # made once, then reused
            choice = Select(name="pair_cascode", value="cascoded" if has else "none",
                            options=[("none", "none"), ("cascoded", "cascoded")],
                            width=104, height=_ROW_PX, margin=_MARGIN)
            choice.on_change("value", self._cascode_changed)
            self.cascode_select = choice
            label = Div(text="<span style='font-size:12px' title='pair.cascode (§7c)'>"
                             "cascode</span>", width=60, margin=(6, 4, 0, 4))
            self._cascode_line = row(label, choice, name="row:pair_cascode")
        choice = self.cascode_select
        label = self._cascode_line.children[0]
        self._set_quietly(choice, "cascoded" if has else "none")
        own = [r for r in rows if not r.name.startswith("row:pair.cascode.")]
        casc = [r for r in rows if r.name.startswith("row:pair.cascode.")]
        if not has:
            return [self._cascode_line, *own]
        own_col = column(*own, spacing=0, name="pair_device_rows")
        casc_col = column(*casc, spacing=0, name="pair_cascode_rows", visible=False)
        which = RadioButtonGroup(name="pair_rows_choice", labels=["pair device", "cascode"],
                                 active=0, height=_ROW_PX, margin=_MARGIN)

        def flip(attr, old, new):
            own_col.visible, casc_col.visible = new == 0, new == 1
        which.on_change("active", flip)
        self._cascode_line = None          # its widgets now sit in this line
        return [row(label, choice, which, name="row:pair_cascode"), own_col, casc_col]

    def _set_quietly(self, widget, value) -> None:
        """Show ``value`` in a selector without it counting as the user's choice."""
        if widget.value != value:
            before = self.explorer._syncing
            self.explorer._syncing = True
            try:
                widget.value = value
            finally:
                self.explorer._syncing = before

    def _cascode_changed(self, attr, old, new):
        if self.explorer._syncing:
            return
        self.explorer.apply_structure(lambda d: with_cascode(d, new == "cascoded"))

    def sync(self) -> None:
        """Show the design on screen in the selectors (after a refused change);
        called with the explorer's callbacks muted."""
        design = self.explorer.design
        sel = getattr(self, "cascode_select", None)
        if sel is not None:
            sel.value = "cascoded" if design.pair.cascode is not None else "none"
        sel = getattr(self, "feedback_select", None)
        if sel is not None:
            sel.value = design.feedback.type if design.feedback is not None else "none"

    # ------------------------------------------------------------- loop
    def feedback_row(self):
        """A selector: no loop, a fixed factor or a divider (its four values as rows)."""
        from bokeh.layouts import row
        from bokeh.models import Div, Select
        design = self.explorer.design
        now = design.feedback.type if design.feedback is not None else "none"
        if getattr(self, "_feedback_line", None) is None:   # made once, then reused
            sel = Select(name="feedback_kind", value=now,
                         options=[(k, _WORDS[k]) for k in FEEDBACK_KINDS], width=170,
                         height=_ROW_PX, margin=_MARGIN)
            sel.on_change("value", self._feedback_changed)
            self.feedback_select = sel
            self._feedback_line = row(Div(text="<span style='font-size:12px'>loop</span>",
                                          width=132, margin=(6, 4, 0, 4)), sel,
                                      name="row:feedback_kind")
        self._set_quietly(self.feedback_select, now)
        return self._feedback_line

    def _feedback_changed(self, attr, old, new):
        if self.explorer._syncing:
            return
        self.explorer.apply_structure(lambda d: switch_feedback(d, new))

    # ------------------------------------------------------------- elements
    def element_rows(self, width: int) -> list:
        """The added elements (value box and remove button each) and an "add" row.

        The heading and the "add" rows are made once per session, an element's
        line once per (position, element): a rebuild for another reason sends
        the page no new widgets.
        """
        from bokeh.layouts import row
        from bokeh.models import Button, Div, Select, TextInput
        design = self.explorer.design
        none = "" if design.element else " — none yet"
        nodes = stage_nodes(design)
        opts = [(n, n) for n in nodes]
        if getattr(self, "_element_fixed", None) is None:
            heading = Div(width=width - 20, margin=(8, 4, 2, 4))
            self.kind = Select(name="element_kind", value="capacitor",
                               options=list(ELEMENT_KINDS), width=106, height=_ROW_PX,
                               margin=_MARGIN)
            self.node_a = Select(name="element_node_a", value="t", options=opts, width=76,
                                 height=_ROW_PX, margin=_MARGIN)
            self.node_b = Select(name="element_node_b", value="ground", options=opts, width=76,
                                 height=_ROW_PX, margin=_MARGIN)
            self.value = TextInput(name="element_value", placeholder="150 fF", width=58,
                                   height=_ROW_PX, margin=_MARGIN)
            self.name = TextInput(name="element_name", placeholder="name (optional)",
                                  width=118, height=_ROW_PX, margin=_MARGIN)
            self.ctl_a = Select(name="element_control_a", value="o1", options=opts, width=72,
                                height=_ROW_PX, margin=_MARGIN, visible=False)
            self.ctl_b = Select(name="element_control_b", value="ground", options=opts,
                                width=72, height=_ROW_PX, margin=_MARGIN, visible=False)
            ctl_words = Div(text="<span style='font-size:12px'>controlled by</span>",
                            margin=(6, 4, 0, 4), visible=False)

            def kind_changed(attr, old, new):
                for w in (self.ctl_a, self.ctl_b, ctl_words):
                    w.visible = new == "transconductance"
            self.kind.on_change("value", kind_changed)
            add = Button(label="Add", name="add_element", width=44, height=_ROW_PX,
                         margin=_MARGIN, button_type="primary")
            add.on_click(self.add)
            self._element_fixed = (
                heading,
                row(self.kind, self.node_a, self.node_b, self.value, add,
                    name="row:add_element"),
                row(self.name, ctl_words, self.ctl_a, self.ctl_b, name="row:add_element_2"))
            self._element_lines = {}
        heading, add_row, add_row_2 = self._element_fixed
        heading.text = (f"<b>Added elements</b> <small>(parasitics, wiring: §7d; they enter "
                        f"every result){none}</small>")
        names = [n for n, _ in opts]
        for sel, fallback in ((self.node_a, "t"), (self.node_b, "ground"),
                              (self.ctl_a, "o1"), (self.ctl_b, "ground")):
            if list(sel.options) != opts:
                sel.options = opts
            if sel.value not in names:
                sel.value = fallback if fallback in names else names[0]
        out = [heading]
        lines = {}
        for i, el in enumerate(design.element):
            text = element_label(el)
            value = format_si(el.value, ELEMENT_KINDS[el.kind], digits=6)
            line = self._element_lines.get((i, text))
            if line is None:
                label = Div(text=f"<span title='element.{i}' style='font-size:12px'>"
                                 f"{_html(text)}</span>", width=200, margin=(6, 4, 0, 4))
                box = TextInput(name=f"text:element.{i}.value", width=90, height=_ROW_PX,
                                margin=_MARGIN, value=value)
                box.on_change("value", self._value_changed(i))
                rm = Button(label="×", name=f"remove_element:{i}", width=30, height=_ROW_PX,
                            margin=_MARGIN, button_type="light")
                rm.on_click(self._remover(i))
                line = row(label, box, rm, name=f"row:element.{i}")
            else:
                self._set_quietly(line.children[1], value)
            lines[(i, text)] = line
            out.append(line)
        self._element_lines = lines          # lines of removed elements are let go
        return out + [add_row, add_row_2]

    def add(self) -> bool:
        """Add the element described by the "add" row (refused with one line when invalid)."""
        kind = self.kind.value
        control = (self.ctl_a.value, self.ctl_b.value) if kind == "transconductance" else None
        nodes = (self.node_a.value, self.node_b.value)
        value, name = self.value.value, self.name.value
        return self.explorer.apply_structure(
            lambda d: with_element(d, kind, nodes, value, name, control))

    def _remover(self, index: int):
        def cb(*_):
            self.explorer.apply_structure(lambda d: without_element(d, index))
        return cb

    def _value_changed(self, index: int):
        def cb(attr, old, new):
            if not self.explorer._syncing:
                self.explorer.edit(f"element.{index}.value", new)
        return cb

