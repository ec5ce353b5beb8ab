"""The C header: a design's coefficients in every number format that holds them (our own layout)."""

from __future__ import annotations

import re

import numpy as np

from audition.realize.fixedpoint import Coefficients, headroom


def c_identifier(name: str) -> str:
    """A C identifier from a file stem: letters, digits and underscores, not starting with a digit."""
    ident = re.sub(r"[^0-9A-Za-z_]", "_", name).strip("_") or "filter"
    return ("f_" + ident) if ident[0].isdigit() else ident


def _c_int(v: int, bits: int) -> str:
    # -2^(W-1) written as a literal is the negation of an out-of-range positive constant in C.
    return f"({-(2 ** (bits - 1)) + 1} - 1)" if v == -(2 ** (bits - 1)) else str(int(v))


def c_header(coeffs: Coefficients, name: str, *, version: str = "") -> str:
    """A C header (our own layout) with the sections in every format that holds them.

    Each format is an array ``<name>_sos_<format>[<NAME>_SECTIONS][5]`` of rows
    {b0, b1, b2, a1, a2} with a0 = 1 implied; fixed-point arrays are integers with
    a ``<NAME>_<FORMAT>_FRAC_BITS`` macro, and the arithmetic they assume is stated
    in the opening comment. A format that cannot hold the coefficients is left
    out with a comment saying why; an unsafe one is written with its warnings.
    """
    d = coeffs.design
    ident = c_identifier(name)
    up = ident.upper()
    n = len(d.sos)
    what = (f"low-pass f0 {d.f0_hz:g} Hz, order {d.order}"
            + (f", {d.alignment}" if d.alignment else (f", Q {d.q:.6g}" if d.q else ""))
            + (f", high-pass {d.highpass_hz:g} Hz" if d.highpass_hz else "")
            + f", H0 {d.passband_gain_db:+.2f} dB")
    lo, hi = d.deviation_band_hz()
    hr = headroom(d.sos, d.rate_hz)
    lines = [
        f"/* {ident}.h: {what}; {n} section(s) at {d.rate_hz:g} Hz, {d.method} method.",
        f" * Written by audition{(' ' + version) if version else ''} (realize --as coefficients).",
        " *",
        f" * Layout: {ident}_sos_<format>[{up}_SECTIONS][5], one row per section, cascaded in order:",
        " *   {b0, b1, b2, a1, a2},  H(z) = (b0 + b1 z^-1 + b2 z^-2) / (1 + a1 z^-1 + a2 z^-2),  a0 = 1 implied.",
        " *   Note the sign: a1 and a2 are SUBTRACTED in the recursion.",
        " * Fixed point Qm.n: coefficient = integer / 2^n (n = <FORMAT>_FRAC_BITS), rounded half to even.",
        " *   Arithmetic assumed: direct form I; samples Q1.(W-1) in the same word length W;",
        " *   acc = b0*x[n] + b1*x[n-1] + b2*x[n-2] - a1*y[n-1] - a2*y[n-2]  (exact, >= 2W+3 bit accumulator)",
        " *   y[n] = saturate((acc + (1 << (n-1))) >> n)  (round half up, arithmetic shift, W-bit saturation)",
        f" * Deviation: |H| of the rounded coefficients minus |H| in double, dB, worst point in {lo:g} .. {hi:g} Hz;",
        " * Noise floor: the arithmetic's rounding noise at the output, rms dBFS (20 log10, full-scale sine",
        " * = -3.01 dBFS), modelled as white, LSB^2/12 per rounding.",
        f" * Headroom: the gain up to section {hr['after_section']} peaks at {hr['peak_gain_db']:+.2f} dB "
        f"({hr['peak_hz']:.0f} Hz, sine); "
        + (f"keep the input's peak below {-hr['peak_gain_db']:.2f} dB re full scale (peak) or it saturates."
           if hr["peak_gain_db"] > 0.005 else "no section output rises above the input."),
        " */",
        f"#ifndef {up}_H",
        f"#define {up}_H",
        "",
        "#include <stdint.h>",
        "",
        f"#define {up}_RATE_HZ {d.rate_hz:.17g}",
        f"#define {up}_SECTIONS {n}",
    ]
    ctype = {("double", None): "double", ("single", None): "float"}
    for r in coeffs.results:
        fmt = r.format
        lines.append("")
        if not r.fits:
            lines.append(f"/* {fmt.label}: left out, it cannot hold these coefficients: {r.warnings[0]} */")
            continue
        status = "safe" if r.safe else "UNSAFE: " + "; ".join(r.warnings)
        noise = "" if r.noise_floor_dbfs is None else f", noise floor {r.noise_floor_dbfs:.1f} dBFS"
        dev = ("unbounded" if r.max_deviation_db is None
               else f"{r.max_deviation_db:+.4f} dB at {r.max_deviation_hz:.0f} Hz")
        lines.append(f"/* {fmt.label}: max pole radius {max(r.pole_radius):.9f}, max deviation {dev}{noise}; "
                     f"{status} */")
        if fmt.fixed:
            lines.append(f"#define {up}_{fmt.key.upper()}_FRAC_BITS {fmt.frac_bits}")
            typ = f"int{fmt.word_bits}_t"
            rows = [", ".join(_c_int(v, fmt.word_bits) for v in row) for row in r.integers]
        else:
            typ = ctype[(fmt.key, None)]
            five = r.sos[:, [0, 1, 2, 4, 5]]
            if fmt.key == "single":
                rows = [", ".join(f"{float(np.float32(v)):.9e}f" for v in row) for row in five]
            else:
                rows = [", ".join(f"{v:.17e}" for v in row) for row in five]
        lines.append(f"static const {typ} {ident}_sos_{fmt.key}[{up}_SECTIONS][5] = {{")
        lines += [f"    {{{row}}}," for row in rows]
        lines.append("};")
    lines += ["", f"#endif /* {up}_H */", ""]
    return "\n".join(lines)
