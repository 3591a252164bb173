"""A drawn picture of the configured stage, as inline SVG text.

:func:`stage_svg` draws the pair (npn or nmos style), its load (resistors or
a current mirror), the tail (ideal source, Norton R ∥ C, or the tail
transistors themselves: simple mirror output, degenerated device with its
resistor, cascode stack, each base/gate on a labelled bias node), the source
resistors and the load capacitors, each labelled with its value. A second
stage is drawn as an inverting transconductor (a triangle marked −g_m2) from
o2 to ``out`` with C_in, R_out, its load capacitor and the Miller capacitor
(with the nulling resistor when non-zero); the drawing widens to hold it.

The second edition of the design (DESIGN.md §7) adds:

- pair degeneration: a resistor R_E in each emitter/source leg, from the
  device (node e1/e2, marked) down to the tail node;
- a cascoded pair: on each side the cascode device between the pair device's
  collector/drain (node c1/c2, marked) and the output o1/o2, in the pair's
  symbol style; both bases/gates on one bus marked with the bias voltage
  ("V_bias 3.3 V"). The drawing grows downward to hold the extra rows;
- a feedback divider: a band under the stage with R_f (∥ C_f when non-zero)
  from the output to the feedback node fb and R_g (and C_g when non-zero) from
  fb to ground, each with its value, and the dashed arrow back to the inputs
  marked β(0) = R_g/(R_f+R_g). A feedback factor keeps the dashed arrow with β_f;
- added elements, by one rule: a resistor or capacitor between the tail node
  ``t`` and ``ground``, ``vpos`` or ``vneg`` is *drawn*, hanging from the tail
  line on its free left side, with its name and value (the first such element
  only: there is one place for it). Every other added element — between two
  stage nodes, at any other node, a transconductance, a second one at ``t`` —
  is *listed* in the "added elements" block under the drawing, one line each:
  name, kind, value and "node A – node B" (and the controlling nodes of a
  transconductance). Nothing in the list is drawn, nothing drawn is listed;
- the notes name the cascode device and any MOS body effect (γ per device group).

pnp/pmos pairs are the mirror image: the rails swap, the drawing keeps its
shape. The drawing is made here from lines, paths and text — freqpair's own
look — and needs nothing at run time but the standard library.
"""
from __future__ import annotations

from html import escape

from freqpair.design.quantities import format_si

__all__ = ["stage_svg", "SCHEMATIC_COLOURS"]

#: Colours of the drawing (wires, devices, value labels, node dots, notes).
SCHEMATIC_COLOURS = {"wire": "#34495e", "device": "#117a8b", "value": "#a84300",
                     "node": "#b0185a", "note": "#4a4a4a", "paper": "#fbfaf5"}

W, W_SECOND = 620, 960           # drawing width without / with a second stage
X1, X2, XC = 210, 410, 310       # side 1, side 2, centre (tail)
Y_TOP, Y_OUT, Y_TAIL = 40, 128, 262
#: the tail's rail height for each tail kind (a cascode stacks two devices)
Y_BOT = {"ideal": 400, "norton": 400, "mirror": 400, "degenerated": 440, "cascode": 480}
X_SS = 640                       # left end of the second stage (C_in at o2)


class _Pen:
    """Collects SVG elements."""

    def __init__(self):
        self.parts: list[str] = []
        c = SCHEMATIC_COLOURS
        self.c = c

    def line(self, x1, y1, x2, y2, colour=None, width=1.6):
        self.parts.append(f'<line x1="{x1:g}" y1="{y1:g}" x2="{x2:g}" y2="{y2:g}" '
                          f'stroke="{colour or self.c["wire"]}" stroke-width="{width:g}"/>')

    def path(self, d, colour=None, width=1.6, fill="none"):
        self.parts.append(f'<path d="{d}" stroke="{colour or self.c["wire"]}" '
                          f'stroke-width="{width:g}" fill="{fill}" stroke-linejoin="round"/>')

    def poly(self, points, colour):
        pts = " ".join(f"{x:g},{y:g}" for x, y in points)
        self.parts.append(f'<polygon points="{pts}" fill="{colour}" stroke="none"/>')

    def dot(self, x, y):
        self.parts.append(f'<circle cx="{x:g}" cy="{y:g}" r="3.2" fill="{self.c["node"]}"/>')

    def circle(self, x, y, r, colour=None):
        self.parts.append(f'<circle cx="{x:g}" cy="{y:g}" r="{r:g}" fill="none" '
                          f'stroke="{colour or self.c["device"]}" stroke-width="1.8"/>')

    def text(self, x, y, s, kind="value", anchor="start", size=12, weight="normal"):
        colour = {"value": self.c["value"], "node": self.c["node"], "note": self.c["note"],
                  "device": self.c["device"]}[kind]
        self.parts.append(f'<text x="{x:g}" y="{y:g}" fill="{colour}" font-size="{size}" '
                          f'font-family="sans-serif" font-weight="{weight}" '
                          f'text-anchor="{anchor}">{escape(s)}</text>')

    # ----------------------------------------------------------- parts
    def _resistor(self, u1, u2, v, amplitude, vertical):
        """Resistor from ``u1`` to ``u2`` along one axis at ``v`` on the other
        (leads, then a six-segment zig-zag body of the given amplitude)."""
        body = (u2 - u1) * 0.6
        a = u1 + (u2 - u1 - body) / 2
        step = body / 6
        pts = [(u1, v), (a, v)]
        pts += [(a + step * (i + 0.5), v + (amplitude if i % 2 == 0 else -amplitude))
                for i in range(6)]
        pts += [(a + body, v), (u2, v)]
        if vertical:
            pts = [(y, x) for x, y in pts]
        self.path(" ".join(("M" if k == 0 else "L") + f"{x:g},{y:g}"
                           for k, (x, y) in enumerate(pts)), self.c["device"])

    def resistor_v(self, x, y1, y2):
        """Vertical resistor between y1 and y2."""
        self._resistor(y1, y2, x, 7, vertical=True)

    def resistor_h(self, x1, x2, y):
        """Horizontal resistor between x1 and x2."""
        self._resistor(x1, x2, y, 6, vertical=False)

    def dashed(self, points, colour=None):
        d = " ".join(("M" if k == 0 else "L") + f"{x:g},{y:g}" for k, (x, y) in enumerate(points))
        self.parts.append(f'<path d="{d}" stroke="{colour or self.c["note"]}" stroke-width="1.4" '
                          'stroke-dasharray="6 4" fill="none"/>')

    def capacitor_h(self, x1, x2, y):
        mid = (x1 + x2) / 2
        self.line(x1, y, mid - 3, y)
        self.line(mid + 3, y, x2, y)
        self.line(mid - 3, y - 9, mid - 3, y + 9, self.c["device"], 2.4)
        self.line(mid + 3, y - 9, mid + 3, y + 9, self.c["device"], 2.4)

    def capacitor_v(self, x, y1, y2):
        mid = (y1 + y2) / 2
        self.line(x, y1, x, mid - 3)
        self.line(x, mid + 3, x, y2)
        self.line(x - 9, mid - 3, x + 9, mid - 3, self.c["device"], 2.4)
        self.line(x - 9, mid + 3, x + 9, mid + 3, self.c["device"], 2.4)

    def ground(self, x, y):
        for i, half in enumerate((9, 6, 3)):
            self.line(x - half, y + 3 * i, x + half, y + 3 * i, self.c["wire"], 1.4)

    def current_source(self, x, y1, y2, downward=True):
        mid = (y1 + y2) / 2
        self.line(x, y1, x, mid - 16)
        self.line(x, mid + 16, x, y2)
        self.circle(x, mid, 16)
        tip, tail = (mid + 9, mid - 9) if downward else (mid - 9, mid + 9)
        self.line(x, tail, x, tip, self.c["device"], 1.8)
        sgn = 1 if downward else -1
        self.poly([(x, tip + 2 * sgn), (x - 4, tip - 5 * sgn), (x + 4, tip - 5 * sgn)],
                  self.c["device"])

    def bipolar(self, x, y_c, y_e, facing: int, pnp=False):
        """A bipolar device: collector lead to ``y_c``, emitter lead to ``y_e``
        (either above the other); the base bar sits on the side ``-facing``.
        The arrow is on the emitter leg: outward for npn, inward for pnp."""
        yc = (y_c + y_e) / 2
        sg = 1 if y_e > y_c else -1
        bx = x - 20 * facing
        self.circle(x - 8 * facing, yc, 24)
        self.line(bx, yc - 14, bx, yc + 14, self.c["device"], 3)
        self.line(bx, yc - 7 * sg, x, yc - 20 * sg, self.c["device"], 1.8)
        self.line(x, yc - 20 * sg, x, y_c)
        self.line(bx, yc + 7 * sg, x, yc + 20 * sg, self.c["device"], 1.8)
        self.line(x, yc + 20 * sg, x, y_e)
        if not pnp:
            ex, ey, fx, fy = bx, yc + 7 * sg, x, yc + 20 * sg
        else:
            ex, ey, fx, fy = x, yc + 20 * sg, bx, yc + 7 * sg
        tx, ty = ex + 0.7 * (fx - ex), ey + 0.7 * (fy - ey)
        dx, dy = (fx - ex), (fy - ey)
        n = (dx * dx + dy * dy) ** 0.5
        ux, uy = dx / n, dy / n
        self.poly([(tx + 5 * ux, ty + 5 * uy), (tx - 4 * ux - 4 * uy, ty - 4 * uy + 4 * ux),
                   (tx - 4 * ux + 4 * uy, ty - 4 * uy - 4 * ux)], self.c["device"])
        return bx, yc

    def mos(self, x, y_d, y_s, facing: int, pmos=False):
        """A MOS device: drain lead to ``y_d``, source lead to ``y_s`` (either
        above the other); the arrow on the source: outward nmos, inward pmos."""
        yc = (y_d + y_s) / 2
        sg = 1 if y_s > y_d else -1
        gx = x - 24 * facing
        cx = x - 16 * facing
        self.line(gx, yc - 13, gx, yc + 13, self.c["device"], 2.6)
        self.line(cx, yc - 17, cx, yc + 17, self.c["device"], 3)
        self.line(cx, yc - 11 * sg, x, yc - 11 * sg, self.c["device"], 1.8)
        self.line(x, yc - 11 * sg, x, y_d)
        self.line(cx, yc + 11 * sg, x, yc + 11 * sg, self.c["device"], 1.8)
        self.line(x, yc + 11 * sg, x, y_s)
        ay = yc + 11 * sg
        mid = (cx + x) / 2
        d = facing if not pmos else -facing
        self.poly([(mid + 5 * d, ay), (mid - 3 * d, ay - 4), (mid - 3 * d, ay + 4)],
                  self.c["device"])
        return gx, yc

    def device(self, dev, x, y_out, y_common, facing):
        """``dev`` drawn with its collector/drain at ``y_out`` and its
        emitter/source at ``y_common``; returns the base/gate point."""
        if dev.is_bipolar:
            return self.bipolar(x, y_out, y_common, facing, pnp=dev.type == "pnp")
        return self.mos(x, y_out, y_common, facing, pmos=dev.type == "pmos")


def _v(value, unit):
    return format_si(value, unit)


def _pair_label(dev) -> str:
    if dev.is_bipolar:
        return f"{dev.type}  β {dev.beta:g}, V_A {_v(dev.early_voltage, 'V')}"
    return (f"{dev.type}  W/L {_v(dev.width, 'm')}/{_v(dev.length, 'm')}, "
            f"V_th {_v(dev.threshold, 'V')}")


class _Layout:
    """Heights of the rows, which depend on what the pair holds: a cascoded
    pair adds a device row above the pair devices, degeneration a resistor
    row below them; everything from the pair down moves with them."""

    def __init__(self, design):
        pair = design.pair
        y = Y_OUT + 22
        self.y_cas = self.y_c = None
        if pair.cascode is not None:
            self.y_cas = (Y_OUT + 22, Y_OUT + 104)   # collector/drain, emitter/source
            self.y_c = Y_OUT + 116                   # nodes c1, c2
            y = self.y_c + 12
        self.y_dev = (y, y + 82)                     # the pair devices
        self.y_e = None
        if pair.degeneration > 0:
            self.y_e = y + 94                        # nodes e1, e2
            self.y_tail = self.y_e + 66
        else:
            self.y_tail = y + 112
        self.y_bot = self.y_tail + Y_BOT[design.tail.type] - Y_TAIL


#: where a drawn added element hangs from the tail line (left of side 1)
X_ADDED = X1 - 44
#: longest element name shown in full (drawn / listed); longer ones are cut with "…"
NAME_DRAWN, NAME_LISTED = 20, 28
_UNITS = {"resistor": "Ω", "capacitor": "F", "transconductance": "S"}
_RAILS = {"ground": None, "vpos": "V+", "vneg": "V−"}


def _element_name(el, index) -> str:
    return el.name if el.name is not None else f"element.{index}"


def _short(s: str, n: int) -> str:
    return s if len(s) <= n else s[:n - 1] + "…"


def _split_elements(design):
    """The rule of the module docstring: ``(drawn, listed)``, each a list of
    ``(index, element)``; at most one drawn element (a shunt at t)."""
    drawn, listed = [], []
    for i, el in enumerate(design.element):
        shunt_at_t = (el.kind in ("resistor", "capacitor") and "t" in el.nodes
                      and set(el.nodes) - {"t"} <= set(_RAILS))
        (drawn if shunt_at_t and not drawn else listed).append((i, el))
    return drawn, listed


def stage_svg(design, width: int | None = None) -> str:
    """SVG drawing of the stage described by ``design``.

    Parameters
    ----------
    design : freqpair.design.schema.Design
    width : int, optional
        Displayed width [px]; the drawing scales (default: natural size, wider
        with a second stage).

    Returns
    -------
    str
        A complete ``<svg>`` element (UTF-8 text), suitable for inline HTML.
    """
    p = _Pen()
    pair = design.pair
    lay = _Layout(design)
    pnp_pair = pair.type in ("pnp", "pmos")
    top_name = "V−" if pnp_pair else "V+"
    bot_name = "V+" if pnp_pair else "V−"
    top_v = design.supply.negative if pnp_pair else design.supply.positive
    bot_v = design.supply.positive if pnp_pair else design.supply.negative
    y_bot, y_tail = lay.y_bot, lay.y_tail
    w = W_SECOND if design.second_stage is not None else W

    # rails
    p.line(X1 - 60, Y_TOP, X2 + 60, Y_TOP, width=2.2)
    p.text(X1 - 66, Y_TOP + 4, f"{top_name} {_v(top_v, 'V')}", "note", "end")
    p.line(XC - 120, y_bot, XC + 170, y_bot, width=2.2)
    p.text(XC - 126, y_bot + 4, f"{bot_name} {_v(bot_v, 'V')}", "note", "end")

    _draw_load(p, design)
    # output nodes and load capacitors
    c_load = design.load.capacitance
    for side, x, sgn in ((1, X1, -1), (2, X2, 1)):
        p.dot(x, Y_OUT)
        p.text(x + 8 * (-sgn), Y_OUT - 6, f"o{side}", "node", "start" if sgn < 0 else "end")
        has_cap = c_load > 0 and (design.load.type == "resistor" or side == 2)
        if has_cap:
            cx = x + 62 * sgn
            p.line(x, Y_OUT, cx, Y_OUT)
            p.capacitor_v(cx, Y_OUT, Y_OUT + 34)
            p.ground(cx, Y_OUT + 34)
            p.text(cx + 12 * sgn, Y_OUT + 22, f"C_L {_v(c_load, 'F')}", "value",
                   "start" if sgn > 0 else "end")

    if pair.cascode is not None:
        _draw_cascode(p, design, lay)

    # pair devices
    y_dev_top, y_dev_bot = lay.y_dev
    for side, x, facing in ((1, X1, 1), (2, X2, -1)):
        p.line(x, lay.y_c if lay.y_c is not None else Y_OUT, x, y_dev_top)
        bx, yc = p.device(pair, x, y_dev_top, y_dev_bot, facing)
        # input lead with source resistor
        xin = x - 150 * facing
        lead_end = x - 60 * facing
        p.line(bx, yc, lead_end, yc)
        rs = design.source.resistance
        if rs > 0:
            p.resistor_h(min(lead_end, xin + 20 * facing), max(lead_end, xin + 20 * facing), yc)
            p.text((lead_end + xin) / 2, yc + 24, f"R_s {_v(rs, 'Ω')}", "value", "middle")
        else:
            p.line(lead_end, yc, xin + 20 * facing, yc)
        p.line(xin + 20 * facing, yc, xin + 6 * facing, yc)
        p.circle(xin, yc, 5, SCHEMATIC_COLOURS["wire"])
        p.text(xin, yc - 12, f"in{side}", "node", "middle")
        p.text(x + 30 * facing, yc + 4, f"Q{side}" if pair.is_bipolar else f"M{side}",
               "device", "start" if facing > 0 else "end", 12, "bold")
        if lay.y_e is not None:
            # degeneration: device → e_k → R_E → tail node (labels toward the centre)
            p.line(x, y_dev_bot, x, lay.y_e)
            p.dot(x, lay.y_e)
            anchor = "start" if facing > 0 else "end"
            p.text(x + 8 * facing, lay.y_e - 6, f"e{side}", "node", anchor)
            p.resistor_v(x, lay.y_e, y_tail)
            p.text(x + 14 * facing, (lay.y_e + y_tail) / 2 + 8,
                   f"R_E {_v(pair.degeneration, 'Ω')}", "value", anchor)
        else:
            p.line(x, y_dev_bot, x, y_tail)
    p.line(X1, y_tail, X2, y_tail)
    p.dot(XC, y_tail)
    p.text(XC + 8, y_tail - 6, "t", "node")

    _draw_tail(p, design, lay)
    drawn, listed = _split_elements(design)
    for index, el in drawn:
        _draw_tail_element(p, el, index, y_tail)
    if design.second_stage is not None:
        _draw_second_stage(p, design.second_stage)
    y_ref = y_bot
    if design.feedback is not None and design.feedback.type == "divider":
        y_ref = _draw_divider(p, design, y_bot + 18)
    y_last, notes_right = _draw_notes(p, design, y_ref)
    if design.feedback is not None and design.feedback.type != "divider":
        y_last = _draw_feedback(p, design, w, y_ref, y_last, notes_right)
    if listed:
        y_last = _draw_listed(p, listed, y_last + 24, w)
    h = y_last + 14

    width = width or w
    size = f' width="{width}" height="{round(width * h / w)}"'
    title = escape(design.name or "differential stage")
    return (f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h:g}"{size} '
            f'role="img" aria-label="schematic: {title}" class="freqpair-schematic">'
            f'<rect x="0" y="0" width="{w}" height="{h:g}" rx="10" '
            f'fill="{SCHEMATIC_COLOURS["paper"]}"/>' + "".join(p.parts) + "</svg>")


def _draw_cascode(p: _Pen, design, lay: _Layout) -> None:
    """The cascode device on each side, from o_k down to c_k; bases/gates turned
    toward the centre onto one bias bus, names on the outer side."""
    cas = design.pair.cascode
    y_top, y_bot = lay.y_cas
    gates = []
    for side, x, facing in ((1, X1, -1), (2, X2, 1)):
        p.line(x, Y_OUT, x, y_top)
        gates.append(p.device(cas, x, y_top, y_bot, facing))
        p.line(x, y_bot, x, lay.y_c)
        p.dot(x, lay.y_c)
        p.text(x - 8 * facing, lay.y_c - 6, f"c{side}", "node",
               "start" if facing < 0 else "end")
        p.text(x + 30 * facing, gates[-1][1] + 4, ("Q" if cas.is_bipolar else "M") + f"_c{side}",
               "device", "end" if facing < 0 else "start", 12, "bold")
    (gx1, yc), (gx2, _) = gates
    p.line(gx1, yc, gx2, yc)
    p.dot(XC, yc)
    p.text(XC, yc - 8, f"V_bias {_v(cas.bias, 'V')}", "note", "middle", 11)


def _draw_tail_element(p: _Pen, el, index, y_tail) -> None:
    """A resistor or capacitor from the tail node to ground or a rail, hanging
    from the tail line left of side 1, its name and value to its left."""
    x, y2 = X_ADDED, y_tail + 40
    p.line(X_ADDED, y_tail, X1, y_tail)
    p.dot(X1, y_tail)
    if el.kind == "resistor":
        p.resistor_v(x, y_tail, y2)
    else:
        p.capacitor_v(x, y_tail, y2)
    rail = _RAILS[next(n for n in el.nodes if n != "t")]
    if rail is None:
        p.ground(x, y2)
    else:
        p.line(x - 9, y2, x + 9, y2, width=2.2)
        p.text(x, y2 + 14, rail, "note", "middle", 11)
    p.text(x - 14, y_tail + 18, _short(_element_name(el, index), NAME_DRAWN), "value", "end", 11)
    p.text(x - 14, y_tail + 32, _v(el.value, _UNITS[el.kind]), "value", "end", 11)


def _draw_listed(p: _Pen, listed, y, w) -> float:
    """The "added elements" block: one line per listed element (a
    transconductance's controlling nodes on a second line when the first would
    not fit in ``w``); returns the baseline of the last line."""
    p.text(16, y, "added elements", "note", "start", 11, "bold")
    for index, el in listed:
        y += 16
        a, b = el.nodes
        line = (f"{_short(_element_name(el, index), NAME_LISTED)}: {el.kind} "
                f"{_v(el.value, _UNITS[el.kind])}, {a} – {b}")
        more = None
        if el.kind == "transconductance":
            c0, c1 = el.control
            more = f"controlled by {c0} – {c1}"
            if 28 + _text_width(f"{line}, {more}", 11) <= w - 16:
                line, more = f"{line}, {more}", None
        p.text(28, y, line, "note", "start", 11)
        if more is not None:
            y += 16
            p.text(40, y, more, "note", "start", 11)
    return y


def _text_width(s: str, size: float) -> float:
    """A generous estimate of a sans-serif label's width [px]."""
    return 0.55 * size * len(s)


def _draw_divider(p: _Pen, design, y_b) -> float:
    """The feedback divider in a band from ``y_b`` down: the output terminal on
    the right, R_f (∥ C_f) to the node fb, R_g and C_g from fb to ground, and the
    dashed arrow from fb back toward the inputs with β(0). Returns the band's
    bottom."""
    fb = design.feedback
    out = _output_name(design)
    y = y_b + 52
    x_fb, x_cg, x_rf0, x_rf1, x_term = 300, 352, 420, 500, 526
    # the arrow back to the inputs
    p.dashed([(x_fb, y), (42, y)])
    p.poly([(38, y), (48, y - 5), (48, y + 5)], p.c["note"])
    p.text(170, y - 8, f"feedback β(0) = R_g/(R_f+R_g) = {fb.factor:.4g}", "note",
           "middle", 11)
    p.text(170, y + 16, "back to the inputs", "note", "middle", 11)
    # fb node, R_g and C_g to ground
    p.dot(x_fb, y)
    p.text(x_fb + 6, y - 8, "fb", "node")
    p.resistor_v(x_fb, y, y + 72)
    p.ground(x_fb, y + 72)
    p.text(x_fb - 14, y + 44, f"R_g {_v(fb.shunt_resistance, 'Ω')}", "value", "end")
    p.line(x_fb, y, x_rf0, y)
    if fb.shunt_capacitance > 0:
        p.dot(x_cg, y)
        p.capacitor_v(x_cg, y, y + 40)
        p.ground(x_cg, y + 40)
        p.text(x_cg + 12, y + 26, f"C_g {_v(fb.shunt_capacitance, 'F')}", "value")
    # R_f (∥ C_f) from the output terminal to fb
    p.resistor_h(x_rf0, x_rf1, y)
    p.text((x_rf0 + x_rf1) / 2, y + 26, f"R_f {_v(fb.series_resistance, 'Ω')}", "value",
           "middle")
    if fb.series_capacitance > 0:
        y_cf = y - 28
        p.dot(x_rf0, y)
        p.dot(x_rf1, y)
        p.line(x_rf0, y, x_rf0, y_cf)
        p.line(x_rf1, y, x_rf1, y_cf)
        p.capacitor_h(x_rf0, x_rf1, y_cf)
        p.text((x_rf0 + x_rf1) / 2, y_cf - 14, f"C_f {_v(fb.series_capacitance, 'F')}",
               "value", "middle")
    p.line(x_rf1, y, x_term - 6, y)
    p.circle(x_term, y, 5, SCHEMATIC_COLOURS["wire"])
    p.text(x_term, y - 12, out, "node", "middle")
    return y + 72


def _output_name(design) -> str:
    return ("out" if design.second_stage is not None
            else "o2" if design.load.type == "mirror" else "o1−o2")


def _draw_load(p: _Pen, design) -> None:
    load = design.load
    if load.type == "resistor":
        r = load.resistance
        mm = design.mismatch.load
        for side, x, sgn in ((1, X1, -1), (2, X2, 1)):
            p.resistor_v(x, Y_TOP, Y_OUT)
            value = r * (1 + (mm / 2 if side == 1 else -mm / 2))
            p.text(x + 14, (Y_TOP + Y_OUT) / 2 + 4, f"R_L {_v(value, 'Ω')}", "value")
        return
    dev = load.device
    y_a, y_b = Y_TOP + 6, Y_OUT - 6
    p.line(X1, Y_TOP, X1, y_a)
    p.line(X2, Y_TOP, X2, y_a)
    # mirror devices: "output" lead toward the pair (bottom), common lead to the rail
    for x, facing in ((X1, -1), (X2, 1)):
        if dev.is_bipolar:
            bx, yc = p.bipolar(x, y_b, y_a, facing, pnp=dev.type == "pnp")
        else:
            bx, yc = p.mos(x, y_b, y_a, facing, pmos=dev.type == "pmos")
        p.line(x, y_b, x, Y_OUT)
    yc = (y_a + y_b) / 2
    gx1 = X1 + (20 if dev.is_bipolar else 24)
    gx2 = X2 - (20 if dev.is_bipolar else 24)
    p.line(gx1, yc, gx2, yc)
    # diode connection on side 1
    p.line(X1 + 45, yc, X1 + 45, Y_OUT)
    p.line(X1, Y_OUT, X1 + 45, Y_OUT)
    p.dot(X1 + 45, yc)
    words = (f"{dev.type}, β {dev.beta:g}" if dev.is_bipolar
             else f"{dev.type}, {_v(dev.width, 'm')}/{_v(dev.length, 'm')}")
    # beside the output device, clear of the devices and the gate bus
    p.text(X2 + 34, yc - 3, "mirror load", "value", "start", 11)
    p.text(X2 + 34, yc + 11, words, "value", "start", 11)


def _device_words(dev) -> str:
    if dev.is_bipolar:
        return f"{dev.type}, β {dev.beta:g}, V_A {_v(dev.early_voltage, 'V')}"
    return f"{dev.type}, W/L {_v(dev.width, 'm')}/{_v(dev.length, 'm')}"


def _tail_device(p: _Pen, dev, y_out, y_common, name, role, bias):
    """One tail device at the centre line: base/gate lead to a labelled bias
    node on the left, its name and role on the right."""
    bx, yc = p.device(dev, XC, y_out, y_common, 1)
    p.line(bx, yc, bx - 26, yc)
    p.dot(bx - 26, yc)
    p.text(bx - 32, yc + 4, bias, "note", "end", 11)
    p.text(XC + 24, yc + 4, name, "device", "start", 12, "bold")
    p.text(XC + 64, yc - 3, role, "value", "start", 11)
    p.text(XC + 64, yc + 11, _device_words(dev), "value", "start", 11)


def _draw_tail(p: _Pen, design, lay: _Layout) -> None:
    tail = design.tail
    y_bot, y_tail = lay.y_bot, lay.y_tail
    i_tail = design.bias.tail_current
    down = design.pair.type in ("npn", "nmos")
    y1 = y_tail
    if tail.type == "ideal":
        p.current_source(XC, y1, y_bot, downward=down)
        p.text(XC + 24, (y1 + y_bot) / 2 + 4, f"I_tail {_v(i_tail, 'A')} (ideal)", "value")
        return
    if tail.type == "norton":
        bus = y1 + 22
        p.line(XC, y1, XC, bus)
        p.line(XC, bus, XC + (140 if tail.capacitance > 0 else 70), bus)
        p.dot(XC, bus)
        p.current_source(XC, bus, y_bot, downward=down)
        p.text(XC - 22, (bus + y_bot) / 2 + 4, f"I_tail {_v(i_tail, 'A')}", "value", "end")
        p.resistor_v(XC + 70, bus, y_bot)
        p.text(XC + 80, (bus + y_bot) / 2 - 4, "R_tail", "value")
        p.text(XC + 80, (bus + y_bot) / 2 + 10, _v(tail.resistance, "Ω"), "value")
        if tail.capacitance > 0:
            p.capacitor_v(XC + 140, bus, y_bot)
            p.text(XC + 152, (bus + y_bot) / 2 - 4, "C_tail", "value")
            p.text(XC + 152, (bus + y_bot) / 2 + 10, _v(tail.capacitance, "F"), "value")
        return
    # transistor tails: the devices themselves, hanging from the tail node
    dev = tail.device
    q = "Q" if dev.is_bipolar else "M"
    vbe = "V_BE" if dev.is_bipolar else "V_GS"
    p.text(XC - 10, y1 + 24, f"I_tail {_v(i_tail, 'A')}", "value", "end")
    if tail.type == "cascode":
        y_x = y1 + 108                      # the node between the two devices
        p.line(XC, y1, XC, y1 + 24)
        _tail_device(p, dev, y1 + 24, y_x - 10, f"{q}_t2", "cascode", f"2·{vbe}")
        p.line(XC, y_x - 10, XC, y_x + 10)
        p.dot(XC, y_x)
        p.text(XC + 8, y_x - 3, "x", "node")
        _tail_device(p, dev, y_x + 10, y_bot - 36, f"{q}_t1", "current source", vbe)
        p.line(XC, y_bot - 36, XC, y_bot)
    else:
        p.line(XC, y1, XC, y1 + 30)
        y_common = y1 + 98
        role = "simple mirror output" if tail.type == "mirror" else "degenerated source"
        bias = vbe if tail.type == "mirror" else f"{vbe} + I·R_deg"
        _tail_device(p, dev, y1 + 30, y_common, f"{q}_t", role, bias)
        if tail.type == "degenerated":
            p.resistor_v(XC, y_common, y_bot)
            p.text(XC + 14, (y_common + y_bot) / 2 + 4,
                   f"R_deg {_v(tail.degeneration, 'Ω')}", "value")
        else:
            p.line(XC, y_common, XC, y_bot)
    if tail.extra_capacitance > 0:
        cx = X2 + 50
        p.line(X2, y_tail, cx, y_tail)
        p.dot(X2, y_tail)
        p.capacitor_v(cx, y_tail, y_tail + 34)
        p.ground(cx, y_tail + 34)
        p.text(cx + 12, y_tail + 22, f"C_extra {_v(tail.extra_capacitance, 'F')}", "value")


def _draw_second_stage(p: _Pen, st) -> None:
    """Inverting transconductor from o2 to ``out``: C_in at o2, R_out and the
    load capacitor at out, the Miller capacitor (and nulling resistor) across."""
    y = Y_OUT
    x_cin, x_m, x_tri, x_tip, x_out, x_cl = X_SS, X_SS + 32, X_SS + 64, X_SS + 134, \
        X_SS + 190, X_SS + 258
    y_m = Y_TOP + 22                        # height of the Miller branch
    # o2 → the second stage (a wire along the output row, over the C_L branch)
    p.line(X2 + 62, y, x_tri, y)
    if st.input_capacitance > 0:
        p.dot(x_cin, y)
        p.capacitor_v(x_cin, y, y + 34)
        p.ground(x_cin, y + 34)
        p.text(x_cin - 12, y + 62, f"C_in {_v(st.input_capacitance, 'F')}", "value", "start")
    # the transconductor: a triangle pointing to out, "−g_m2" inside
    p.path(f"M{x_tri:g},{y - 34:g} L{x_tri:g},{y + 34:g} L{x_tip:g},{y:g} Z",
           p.c["device"], 1.8, "none")
    p.text(x_tri + 6, y + 5, "−g_m2", "device", "start", 12, "bold")
    p.text((x_tri + x_tip) / 2, y + 52, f"g_m2 {_v(st.gm, 'S')}", "value", "middle")
    p.line(x_tip, y, x_cl, y)
    p.dot(x_out, y)
    p.text(x_out + 6, y - 6, "out", "node")
    # R_out and the load capacitor to AC ground
    p.resistor_v(x_out, y, y + 80)
    p.ground(x_out, y + 80)
    p.text(x_out + 12, y + 36, "R_out", "value")
    p.text(x_out + 12, y + 50, _v(st.output_resistance, "Ω"), "value")
    if st.load_capacitance > 0:
        p.capacitor_v(x_cl, y, y + 34)
        p.ground(x_cl, y + 34)
        p.text(x_cl + 14, y + 14, "C_L2", "value")
        p.text(x_cl + 14, y + 28, _v(st.load_capacitance, "F"), "value")
    # the Miller branch from the input node to out, over the triangle
    if st.miller_capacitance > 0:
        p.dot(x_m, y)
        p.line(x_m, y, x_m, y_m)
        p.dot(x_out, y)
        if st.nulling_resistance > 0:
            x_r = x_m + 64
            p.resistor_h(x_m, x_r, y_m)
            p.text((x_m + x_r) / 2, y_m - 12, f"R_z {_v(st.nulling_resistance, 'Ω')}",
                   "value", "middle")
        else:
            x_r = x_m + 30
            p.line(x_m, y_m, x_r, y_m)
        x_c = x_out - 10
        p.line(x_r, y_m, x_c - 22, y_m)
        p.capacitor_h(x_c - 22, x_c, y_m)
        p.line(x_c, y_m, x_out, y_m)
        p.line(x_out, y_m, x_out, y)
        p.text(x_c - 11, y_m - 12, f"C_c {_v(st.miller_capacitance, 'F')}", "value", "middle")


def _draw_feedback(p: _Pen, design, w, y_ref, y_last, notes_right) -> float:
    """A feedback factor: a dashed arrow from the output back toward the
    inputs, with β_f — right of the notes, or under them when a note reaches
    that far. Returns the lowest baseline used."""
    out = _output_name(design)
    x0, x1 = w - 24, w - 230
    y = y_ref + 46 if notes_right < x1 - 30 else y_last + 40
    p.dashed([(x0, y), (x1, y)])
    p.poly([(x1 - 2, y), (x1 + 8, y - 5), (x1 + 8, y + 5)], p.c["note"])
    p.text((x0 + x1) / 2, y - 8, f"feedback β_f = {design.feedback.factor:g}", "note",
           "middle", 11)
    p.text((x0 + x1) / 2, y + 16, f"from {out} back to the inputs", "note", "middle", 11)
    return max(y_last, y + 24)


def _body_effect_note(design) -> str | None:
    """The note "body effect γ = …" for the MOS devices that have it, grouped
    by value (None when no device has it)."""
    groups: dict[float, list[str]] = {}
    devices = [("pair", design.pair), ("cascode", design.pair.cascode),
               ("load", getattr(design.load, "device", None)),
               ("tail", getattr(design.tail, "device", None))]
    for role, dev in devices:
        gamma = getattr(dev, "body_effect", 0.0)      # bipolar devices and None: 0
        if gamma > 0:
            groups.setdefault(gamma, []).append(role)
    if not groups:
        return None
    return "body effect " + "; ".join(f"γ = {g:g} √V ({', '.join(roles)})"
                                      for g, roles in groups.items())


def _draw_notes(p: _Pen, design, y_ref) -> tuple[float, float]:
    """The notes under the drawing (below ``y_ref``); returns the baseline of
    the last one and their (estimated) right edge."""
    notes = [f"pair: {_pair_label(design.pair)}"]
    if design.pair.cascode is not None:
        notes.append(f"cascode: {_pair_label(design.pair.cascode)}")
    body = _body_effect_note(design)
    if body is not None:
        notes.append(body)
    mm = design.mismatch
    if mm.load or mm.gm:
        notes.append(f"mismatch: load {mm.load * 100:g} %, g_m {mm.gm * 100:g} % "
                     "(split ±½ between sides)")
    if design.second_stage is not None:
        notes.append("second stage: inverting transconductor from o2 to out")
    fb = design.feedback
    if fb is not None and fb.type == "divider":
        notes.append(f"feedback divider from {_output_name(design)}, alone "
                     "(not loaded by the stage)")
    notes.append(f"input common mode {_v(design.bias.input_common_mode, 'V')}, "
                 f"T = {design.bias.temperature:g} K")
    y = y_ref + 28
    for i, n in enumerate(notes):
        y = y_ref + 28 + 16 * i
        p.text(16, y, n, "note", "start", 11)
    return y, 16 + max(_text_width(n, 11) for n in notes)
