"""Circuit drawings of a realisation: each stage with its preferred-value parts (schemdraw, Agg).

schemdraw is an optional dependency (the ``circuit`` extra): ``realize --circuit``
asks for it and says how to install it when it is missing; nothing else imports it.

A series RLC stage is drawn as R then L in the signal path and C to ground, the
output across C (with the load, when one is given, across C too); an RC stage as
R and C; a unity-gain Sallen–Key stage as R1, R2 in series, C1 from their
junction to the output (feedback), C2 from the op-amp's + input to ground and
the op-amp as a follower; a buffered RC as RC then a follower. Stages are
buffered from each other as :class:`audition.realize.Realisation` assumes.
"""

from __future__ import annotations

import os

from audition.errors import BadParameter, OutputRefused

_PREFIXES = ((1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n"), (1e-12, "p"))


def eng(v: float, unit: str) -> str:
    """A part value as it is printed on a schematic: 3 significant figures and an SI prefix (4.7 kΩ, 33 nF)."""
    for scale, p in _PREFIXES:
        if abs(v) >= scale * 0.9995:
            return f"{v / scale:.3g} {p}{unit}"
    return f"{v:.3g} {unit}"


def _schemdraw():
    try:
        import schemdraw
        import schemdraw.elements as elm
    except ImportError:
        raise BadParameter("--circuit needs schemdraw: pip install 'audition[circuit]' (or pip install schemdraw)") \
            from None
    schemdraw.use("matplotlib")
    return schemdraw, elm


def drawing(real):
    """The schemdraw Drawing of every stage of ``real`` (an :class:`audition.realize.Realisation`), left to right."""
    from audition.plots import pyplot

    pyplot()  # the Agg backend before schemdraw touches matplotlib
    schemdraw, elm = _schemdraw()
    d = schemdraw.Drawing(show=False)
    d.config(fontsize=11, unit=2.2)
    d += elm.Dot(open=True).label("in", "left")
    if real.source_ohm:
        d += elm.Resistor().right().label(f"source\n{eng(real.source_ohm, 'Ω')}", loc="top").color("dimgray")
    for i, st in enumerate(real.stages, 1):
        p = st.parts
        last = i == len(real.stages)
        if st.topology in ("series-rlc", "rc"):
            d += elm.Resistor().right().label(f"R{i}\n{eng(p['r_ohm'], 'Ω')}", loc="top")
            if st.topology == "series-rlc":
                d += elm.Inductor2().right().label(f"L{i}\n{eng(p['l_henry'], 'H')}", loc="top")
            d += elm.Dot()
            node = d.here
            d += elm.Capacitor().down().label(f"C{i}\n{eng(p['c_farad'], 'F')}", loc="bottom")
            d += elm.Ground()
            d.here = node
            if last and st.load_ohm:
                d += elm.Line().right(2.4)
                d += elm.Dot()
                n2 = d.here
                d += elm.Resistor().down().label(f"load\n{eng(st.load_ohm, 'Ω')}", loc="bottom").color("dimgray")
                d += elm.Ground()
                d.here = n2
            if not last:
                d += elm.Line().right(0.8)
                d += elm.Opamp(leads=True).anchor("in2").right().label(f"buffer {i}", loc="center", ofst=(0, 0))
                op = d.elements[-1]
                d += elm.Line().at(op.in1).up(1.1)
                d += elm.Line().tox(op.out)
                d += elm.Line().toy(op.out)
                d.here = op.out
        else:  # sallen-key, buffered-rc
            if st.topology == "sallen-key":
                d += elm.Resistor().right().label(f"R{i}a\n{eng(p['r1_ohm'], 'Ω')}", loc="top")
                d += elm.Dot()
                j = d.here
                d += elm.Resistor().right().label(f"R{i}b\n{eng(p['r2_ohm'], 'Ω')}", loc="top")
                d += elm.Dot()
                plus = d.here
                d += elm.Capacitor().down().label(f"C{i}b\n{eng(p['c2_farad'], 'F')}", loc="bottom")
                d += elm.Ground()
                d.here = plus
                d += elm.Line().right(0.6)
                d += elm.Opamp(leads=True).anchor("in2").right()
                op = d.elements[-1]
                d += elm.Line().at(op.in1).up(1.1)
                d += elm.Line().tox(op.out)
                d += elm.Line().toy(op.out)
                d += elm.Line().at(j).up(3.2)
                d += elm.Capacitor().right().tox(op.out).label(f"C{i}a\n{eng(p['c1_farad'], 'F')}", loc="top")
                d += elm.Line().toy(op.out)
                d.here = op.out
            else:
                d += elm.Resistor().right().label(f"R{i}\n{eng(p['r_ohm'], 'Ω')}", loc="top")
                d += elm.Dot()
                node = d.here
                d += elm.Capacitor().down().label(f"C{i}\n{eng(p['c_farad'], 'F')}", loc="bottom")
                d += elm.Ground()
                d.here = node
                d += elm.Line().right(0.6)
                d += elm.Opamp(leads=True).anchor("in2").right()
                op = d.elements[-1]
                d += elm.Line().at(op.in1).up(1.1)
                d += elm.Line().tox(op.out)
                d += elm.Line().toy(op.out)
                d.here = op.out
        if not last:
            d += elm.Line().right(0.6)
    d += elm.Line().right(0.8)
    d += elm.Dot(open=True).label("out", "right")
    return d


def figure(real):
    """The circuit as a matplotlib figure, with a title naming the topology and each stage's f0 (and Q)."""
    d = drawing(real)
    fig = d.draw(show=False).fig
    name = {"series-rlc": "series RLC", "sallen-key": "unity-gain Sallen–Key"}[real.topology]
    stages = "; ".join(f"stage {i}: f0 {st.f0_hz:,.0f} Hz" + ("" if st.q is None else f", Q {st.q:.3f}")
                       for i, st in enumerate(real.stages, 1))
    series = ", ".join(f"{k} {v}" for k, v in real.series.items())
    fig.suptitle(f"{name}, preferred values ({series})\n{stages}", fontsize=10)
    fig.set_size_inches(max(6.0, fig.get_size_inches()[0]), fig.get_size_inches()[1] + 0.8)
    fig.tight_layout()
    return fig


def write_circuit(real, path) -> None:
    """Write the drawing as PNG or SVG (from the file's ending), atomically (a temporary file, then rename)."""
    import io

    from audition.io.tempfiles import _TempFile
    from audition.plots import pyplot

    target, path = path, os.fspath(path)  # a checked audition.io.guard.Target keeps its checks for the write
    ext = os.path.splitext(path)[1].lower()
    if ext not in (".png", ".svg"):
        raise BadParameter(f"circuit={path!r}: give a file name ending in .png or .svg")
    fig = figure(real)
    buf = io.BytesIO()
    try:
        fig.savefig(buf, format=ext[1:], dpi=130)
    finally:
        pyplot().close(fig)
    tmp = _TempFile(target)
    try:
        view = memoryview(buf.getvalue())
        while view:
            view = view[os.write(tmp.fd, view):]
    except OSError as exc:
        tmp.remove()
        raise OutputRefused(f"{path!r}: writing the circuit drawing failed ({exc.strerror or exc})") from None
    except BaseException:
        tmp.remove()
        raise
    tmp.commit()
