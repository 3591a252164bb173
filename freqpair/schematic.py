"""A drawn picture of the configured stage, as inline SVG text.

:func:`stage_svg` draws the pair (npn or nmos style), its load (resistors or
a current mirror), the tail (ideal source, Norton R ∥ C, or a transistor
tail), the source resistors and the load capacitors, each labelled with its
value. The drawing is made here from lines, paths and text — freqpair's own
look — and needs nothing at run time but the standard library.
"""
from __future__ import annotations

from html import escape

from .quantities import format_si

__all__ = ["stage_svg", "SCHEMATIC_COLOURS"]

#: Colours of the drawing (wires, devices, value labels, node dots, notes).
SCHEMATIC_COLOURS = {"wire": "#34495e", "device": "#117a8b", "value": "#a84300",
                     "node": "#b0185a", "note": "#4a4a4a", "paper": "#fbfaf5"}

W, H = 620, 500
X1, X2, XC = 210, 410, 310       # side 1, side 2, centre (tail)
Y_TOP, Y_OUT, Y_TAIL, Y_BOT = 40, 128, 262, 400


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

    def bipolar(self, x, y_top, y_bot, facing: int, pnp=False):
        """A bipolar device: collector lead to ``y_top`` (npn) and emitter lead to
        ``y_bot``; the base bar sits on the side ``-facing`` (input side)."""
        yc = (y_top + y_bot) / 2
        bx = x - 20 * facing
        self.circle(x - 8 * facing, yc, 24)
        self.line(bx, yc - 14, bx, yc + 14, self.c["device"], 3)
        up, down = (yc - 7, yc + 7)
        self.line(bx, up, x, yc - 20, self.c["device"], 1.8)
        self.line(x, yc - 20, x, y_top)
        self.line(bx, down, x, yc + 20, self.c["device"], 1.8)
        self.line(x, yc + 20, x, y_bot)
        # arrow on the emitter leg (lower leg for npn, upper for pnp)
        if not pnp:
            ex, ey, fx, fy = bx, down, x, yc + 20
        else:
            ex, ey, fx, fy = x, yc - 20, bx, up
        tx, ty = ex + 0.7 * (fx - ex), ey + 0.7 * (fy - ey)
        dx, dy = (fx - ex), (fy - ey)
        n = (dx * dx + dy * dy) ** 0.5
        ux, uy = dx / n, dy / n
        self.poly([(tx + 5 * ux, ty + 5 * uy), (tx - 4 * ux - 4 * uy, ty - 4 * uy + 4 * ux),
                   (tx - 4 * ux + 4 * uy, ty - 4 * uy - 4 * ux)], self.c["device"])
        return bx, yc

    def mos(self, x, y_top, y_bot, facing: int, pmos=False):
        """A MOS device: drain lead to ``y_top``, source lead to ``y_bot`` (nmos)."""
        yc = (y_top + y_bot) / 2
        gx = x - 24 * facing
        cx = x - 16 * facing
        self.line(gx, yc - 13, gx, yc + 13, self.c["device"], 2.6)
        self.line(cx, yc - 17, cx, yc + 17, self.c["device"], 3)
        self.line(cx, yc - 11, x, yc - 11, self.c["device"], 1.8)
        self.line(x, yc - 11, x, y_top)
        self.line(cx, yc + 11, x, yc + 11, self.c["device"], 1.8)
        self.line(x, yc + 11, x, y_bot)
        ay = yc + 11 if not pmos else yc - 11
        mid = (cx + x) / 2
        d = facing if not pmos else -facing
        self.poly([(mid + 5 * d, ay), (mid - 3 * d, ay - 4), (mid - 3 * d, ay + 4)],
                  self.c["device"])
        return gx, yc

    def device(self, dev, x, y_top, y_bot, facing):
        if dev.is_bipolar:
            return self.bipolar(x, y_top, y_bot, facing, pnp=dev.type == "pnp")
        return self.mos(x, y_top, y_bot, facing, pmos=dev.type == "pmos")


def _v(value, unit):
    return format_si(value, unit)


def _pair_label(dev) -> str:
    if dev.is_bipolar:
        return f"{dev.type}  β {dev.beta:g}, V_A {_v(dev.early_voltage, 'V')}"
    return (f"{dev.type}  W/L {_v(dev.width, 'm')}/{_v(dev.length, 'm')}, "
            f"V_th {_v(dev.threshold, 'V')}")


def stage_svg(design, width: int | None = None) -> str:
    """SVG drawing of the stage described by ``design``.

    Parameters
    ----------
    design : freqpair.design.Design
    width : int, optional
        Displayed width [px]; the drawing scales (default: natural size).

    Returns
    -------
    str
        A complete ``<svg>`` element (UTF-8 text), suitable for inline HTML.
    """
    p = _Pen()
    pair = design.pair
    pnp_pair = pair.type in ("pnp", "pmos")
    top_name = "V−" if pnp_pair else "V+"
    bot_name = "V+" if pnp_pair else "V−"
    top_v = design.supply.negative if pnp_pair else design.supply.positive
    bot_v = design.supply.positive if pnp_pair else design.supply.negative

    # rails
    p.line(X1 - 60, Y_TOP, X2 + 60, Y_TOP, width=2.2)
    p.text(X1 - 66, Y_TOP + 4, f"{top_name} {_v(top_v, 'V')}", "note", "end")
    p.line(XC - 120, Y_BOT, XC + 170, Y_BOT, width=2.2)
    p.text(XC - 126, Y_BOT + 4, f"{bot_name} {_v(bot_v, 'V')}", "note", "end")

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

    # pair devices
    y_dev_top, y_dev_bot = Y_OUT + 22, Y_TAIL - 30
    for side, x, facing in ((1, X1, 1), (2, X2, -1)):
        p.line(x, Y_OUT, x, y_dev_top)
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
        p.line(x, y_dev_bot, x, Y_TAIL)
    p.line(X1, Y_TAIL, X2, Y_TAIL)
    p.dot(XC, Y_TAIL)
    p.text(XC + 8, Y_TAIL - 6, "t", "node")

    _draw_tail(p, design)
    _draw_notes(p, design)

    width = width or W
    size = f' width="{width}" height="{round(width * H / W)}"'
    title = escape(design.name or "differential stage")
    return (f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {W} {H}"{size} '
            f'role="img" aria-label="schematic: {title}" class="freqpair-schematic">'
            f'<rect x="0" y="0" width="{W}" height="{H}" rx="10" '
            f'fill="{SCHEMATIC_COLOURS["paper"]}"/>' + "".join(p.parts) + "</svg>")


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
    label = (f"mirror load ({dev.type}, β {dev.beta:g})" if dev.is_bipolar
             else f"mirror load ({dev.type}, {_v(dev.width, 'm')}/{_v(dev.length, 'm')})")
    # beside the output device, clear of the devices and the gate bus
    p.text(X2 + 34, yc + 4, label, "value", "start", 11)


def _draw_tail(p: _Pen, design) -> None:
    tail = design.tail
    i_tail = design.bias.tail_current
    y1 = Y_TAIL
    if tail.type == "ideal":
        p.current_source(XC, y1, Y_BOT, downward=design.pair.type in ("npn", "nmos"))
        p.text(XC + 24, (y1 + Y_BOT) / 2 + 4, f"I_tail {_v(i_tail, 'A')} (ideal)", "value")
        return
    if tail.type == "norton":
        bus = y1 + 22
        p.line(XC, y1, XC, bus)
        p.line(XC, bus, XC + (140 if tail.capacitance > 0 else 70), bus)
        p.dot(XC, bus)
        p.current_source(XC, bus, Y_BOT, downward=design.pair.type in ("npn", "nmos"))
        p.text(XC - 22, (bus + Y_BOT) / 2 + 4, f"I_tail {_v(i_tail, 'A')}", "value", "end")
        p.resistor_v(XC + 70, bus, Y_BOT)
        p.text(XC + 80, (bus + Y_BOT) / 2 - 4, "R_tail", "value")
        p.text(XC + 80, (bus + Y_BOT) / 2 + 10, _v(tail.resistance, "Ω"), "value")
        if tail.capacitance > 0:
            p.capacitor_v(XC + 140, bus, Y_BOT)
            p.text(XC + 152, (bus + Y_BOT) / 2 - 4, "C_tail", "value")
            p.text(XC + 152, (bus + Y_BOT) / 2 + 10, _v(tail.capacitance, "F"), "value")
        return
    # transistor tails: one device drawn, the kind written beside it
    dev = tail.device
    y_top, y_bot = y1 + 30, Y_BOT - 40
    p.line(XC, y1, XC, y_top)
    bx, yc = p.device(dev, XC, y_top, y_bot, 1)
    p.line(bx, yc, bx - 30, yc)
    p.text(bx - 34, yc + 4, "bias", "note", "end")
    if tail.type == "degenerated":
        p.resistor_v(XC, y_bot, Y_BOT)
        p.text(XC + 14, (y_bot + Y_BOT) / 2 + 4, f"R_deg {_v(tail.degeneration, 'Ω')}",
               "value")
    else:
        p.line(XC, y_bot, XC, Y_BOT)
    extra = f", + {_v(tail.extra_capacitance, 'F')}" if tail.extra_capacitance > 0 else ""
    p.text(XC + 34, yc - 4, f"{tail.type} tail ({dev.type}){extra}", "value")
    p.text(XC + 34, yc + 12, f"I_tail {_v(i_tail, 'A')}", "value")


def _draw_notes(p: _Pen, design) -> None:
    notes = [f"pair: {_pair_label(design.pair)}"]
    mm = design.mismatch
    if mm.load or mm.gm:
        notes.append(f"mismatch: load {mm.load * 100:g} %, g_m {mm.gm * 100:g} % "
                     "(split ±½ between sides)")
    st = design.second_stage
    if st is not None:
        notes.append(f"second stage on o2: g_m2 {_v(st.gm, 'S')}, R_out "
                     f"{_v(st.output_resistance, 'Ω')}, C_c {_v(st.miller_capacitance, 'F')}")
    if design.feedback is not None:
        notes.append(f"in a loop with feedback factor β_f = {design.feedback.factor:g}")
    notes.append(f"input common mode {_v(design.bias.input_common_mode, 'V')}, "
                 f"T = {design.bias.temperature:g} K")
    for i, n in enumerate(notes):
        p.text(16, Y_BOT + 28 + 16 * i, n, "note", "start", 11)
