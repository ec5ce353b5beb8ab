"""Pictures of a realisation: the real circuit against its target, or rounded coefficients against double."""

from __future__ import annotations

import numpy as np

from audition.plots import audio_ticks, pyplot, save_figure

_UNITS = (("_ohm", "Ω"), ("_henry", "H"), ("_farad", "F"))
_PREFIXES = ((1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n"), (1e-12, "p"))


def _eng(v, unit):
    for scale, p in _PREFIXES:
        if abs(v) >= scale * 0.9995:
            return f"{v / scale:.3g} {p}{unit}"
    return f"{v:.3g} {unit}"


def _parts(stage) -> str:
    out = []
    for k, v in stage.parts.items():
        for suffix, unit in _UNITS:
            if k.endswith(suffix):
                out.append(f"{k[: -len(suffix)].upper()} {_eng(v, unit)}")
    return ", ".join(out)


def _pct(v: float) -> str:
    # Round first so that a tiny negative error does not print as "-0.00 %".
    return f"{round(v, 2) + 0.0:+.2f} %"


def _db(h):
    return 20 * np.log10(np.maximum(np.abs(h), 1e-12))


def plot_realisation(real, tol, path) -> None:
    """:func:`realisation_figure` written as a PNG."""
    save_figure(realisation_figure(real, tol), path)


def realisation_figure(real, tol=None):
    """Magnitude of the real circuit against the target (top) and their difference (bottom).

    With a Monte Carlo ``tol`` the 5th..95th percentile band of the builds is
    shaded in both panels; the audio band 20 Hz .. 20 kHz is marked.
    """
    from audition.realize import ANALOG_BAND_HZ

    plt = pyplot()
    fmax = max(40000.0, 5 * max(s.target.f0_hz for s in real.stages))
    f = np.geomspace(10.0, fmax, 1200)
    ht, hr = _db(real.target_response(f)), _db(real.response(f))

    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(9, 7.5), sharex=True, height_ratios=(3, 2))
    ax1.axvspan(*ANALOG_BAND_HZ, color="C2", alpha=0.05, label="audio band (deviation measured here)")
    if tol is not None:
        resp = _db(tol.responses(f))
        lo, mid, hi = np.percentile(resp, [5, 50, 95], axis=0)
        ax1.fill_between(f, lo, hi, color="C0", alpha=0.25, lw=0,
                         label=f"5th–95th percentile of {tol.trials} builds (±{tol.tolerance_pct:g} % R, C"
                               + (f", ±{tol.inductor_tolerance_pct:g} % L)" if real.topology == "series-rlc" else ")"))
        dev = resp - ht[None, :]
        dlo, dmid, dhi = np.percentile(dev, [5, 50, 95], axis=0)
        ax2.fill_between(f, dlo, dhi, color="C0", alpha=0.25, lw=0, label="5th–95th percentile of builds")
    ax1.semilogx(f, ht, "--", color="0.3", lw=1.6, label="target (analog prototype)")
    ax1.semilogx(f, hr, color="C0", lw=2, label="real circuit, preferred values")
    ax1.axvline(d0 := real.design.f0_hz, color="C1", lw=0.8, ls=":")
    ax1.annotate(f"f0 {d0:,.0f} Hz", (d0, 0), xytext=(4, -14), textcoords="offset points", color="C1", fontsize=8.5)
    top = max(3.0, float(hr.max()) + 3)
    ax1.set_ylim(max(-60.0, float(ht.min()) - 5), top)
    ax1.set_ylabel("magnitude (dB)")
    ax1.grid(True, which="both", alpha=0.3)
    ax1.legend(loc="lower left", fontsize=8.5)
    rows = []
    for i, st in enumerate(real.stages, 1):
        err = st.errors()
        fig_txt = f"f0 {st.f0_hz:,.0f} Hz ({_pct(err['f0_pct'])})"
        if st.q is not None:
            fig_txt += f", Q {st.q:.3f} ({_pct(err['q_pct'])})"
        rows.append(f"stage {i}: {_parts(st)}  →  {fig_txt}")
    ends = []
    if real.source_ohm:
        ends.append(f"source {_eng(real.source_ohm, 'Ω')} (adds to the first R)")
    ends.append("load " + ("open" if real.load_ohm is None else _eng(real.load_ohm, "Ω")
                           + (" (op-amp output drives it)" if real.topology == "sallen-key" else " across the last C")))
    rows.append(", ".join(ends) + f";  H0 {real.h0_db + 0.0:+.2f} dB")
    for s in real.omitted:
        rows.append(f"not realised here: the {s.kind} at {s.f0_hz:,.0f} Hz (build it apart or as coefficients)")
    ax1.text(0.01, 0.80, "\n".join(rows), transform=ax1.transAxes, ha="left", va="top", fontsize=8.5,
             bbox=dict(boxstyle="round", fc="white", ec="0.7", alpha=0.9))
    d = real.design
    name = {"series-rlc": "series RLC", "sallen-key": "unity-gain Sallen–Key"}[real.topology]
    q0 = real.stages[0].target.q
    what = f"f0 {d.f0_hz:,.0f} Hz, " + (f"Q {q0:.3g}" if len(real.stages) == 1 and q0
                                        else f"order {sum(s.target.order for s in real.stages)}"
                                        + (f" {d.alignment}" if d.alignment else ""))
    symbol = {"resistor": "R", "capacitor": "C", "inductor": "L"}
    series = ", ".join(f"{symbol.get(k, k)} {v}" for k, v in real.series.items())
    ax1.set_title(f"{name} realisation of {what}; preferred values {series}", fontsize=10)

    ax2.axvspan(*ANALOG_BAND_HZ, color="C2", alpha=0.05)
    ax2.semilogx(f, hr - ht, color="C0", lw=2, label="real circuit minus target")
    ax2.axhline(0.0, color="0.3", lw=1, ls="--")
    # A load (or a source) that divides the level lowers the whole response by H0: a level offset that a
    # make-up gain restores, drawn as its own line, not a point of the response's shape.
    offset = real.h0_db - real.target_h0_db
    band = (f >= ANALOG_BAND_HZ[0]) & (f <= ANALOG_BAND_HZ[1])
    shape = (hr - ht - offset)[band]
    k = int(np.argmax(np.abs(shape)))
    dev_db, dev_hz = float(shape[k]), float(f[band][k])
    if abs(offset) >= 0.005:
        ax2.axhline(offset, color="C4", lw=1.4, ls="-.",
                    label=f"flat loss from the load: {offset:+.2f} dB at every frequency (a level offset)")
    ax2.plot([dev_hz], [dev_db + offset], "o", color="C3")
    left = dev_hz > np.sqrt(f[0] * f[-1])
    what = "shape error in audio band, beyond the flat loss" if abs(offset) >= 0.005 else "worst in audio band"
    # The label sits in the panel's top corner away from the point, clear of the curve and the band.
    ax2.annotate(f"{what}: {dev_db:+.2f} dB at {dev_hz:,.0f} Hz", (dev_hz, dev_db + offset),
                 xytext=(0.03 if not left else 0.97, 0.92), textcoords="axes fraction",
                 ha="left" if not left else "right", va="top", color="C3", fontsize=9,
                 bbox=dict(boxstyle="round", fc="white", ec="C3", alpha=0.9),
                 arrowprops=dict(arrowstyle="->", color="C3"))
    span = float(np.max(np.abs((hr - ht)[band])))
    if tol is not None:
        span = max(span, float(np.max(np.abs(np.concatenate([dlo[band], dhi[band]])))))
    ax2.set_ylim(-1.3 * span - 0.05, 1.3 * span + 0.05)
    ax2.set_ylabel("difference (dB)")
    ax2.set_xlabel("frequency (Hz)")
    ax2.grid(True, which="both", alpha=0.3)
    ax2.legend(loc="lower left", fontsize=8.5)
    ax2.set_xlim(f[0], f[-1])
    for ax in (ax1, ax2):
        audio_ticks(ax, f[0], f[-1])
    fig.tight_layout()
    return fig


def plot_coefficients(coeffs, path) -> None:
    save_figure(coefficients_figure(coeffs), path)


def coefficients_figure(coeffs):
    """Magnitude in every format that fits (top) and |rounded - double| in dB on a log scale (bottom)."""
    plt = pyplot()
    d = coeffs.design
    nyq = d.rate_hz / 2
    f = np.geomspace(10.0, nyq * 0.999, 2000)
    lo, hi = d.deviation_band_hz()
    fb = np.geomspace(lo, hi, 2000)
    ref = _db(coeffs.response("double", f))
    ref_b = _db(coeffs.response("double", fb))

    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(9, 7.5), height_ratios=(3, 2))
    ax1.semilogx(f, ref, color="k", lw=2.2, label="double")
    ax2.axhline(coeffs.max_deviation_limit_db, color="C3", lw=1, ls="--",
                label=f"limit {coeffs.max_deviation_limit_db:g} dB")
    styles = {"single": ("C0", "-"), "q1_15": ("C1", "--"), "q1_31": ("C2", "--"), "q2_14": ("C4", "-"),
              "q2_30": ("C5", ":")}
    for r in coeffs.results:
        key = r.format.key
        if key == "double":
            continue
        color, ls = styles.get(key, ("C7", "-"))
        if not r.fits:
            ax1.plot([], [], color=color, ls=ls, label=f"{r.format.label}: does not fit")
            continue
        verdict = "safe" if r.safe else "UNSAFE"
        ax1.semilogx(f, _db(coeffs.response(key, f)), color=color, ls=ls, lw=1.4,
                     label=f"{r.format.label} ({verdict}, pole radius {max(r.pole_radius):.6f})")
        with np.errstate(invalid="ignore"):
            dev = np.abs(_db(coeffs.response(key, fb)) - ref_b)
        worst = "unbounded" if r.max_deviation_db is None else f"{r.max_deviation_db:+.2g} dB"
        ax2.loglog(fb, np.clip(np.nan_to_num(dev, nan=1e3, posinf=1e3), 1e-12, 1e3), color=color, ls=ls, lw=1.4,
                   label=f"{r.format.label}: worst {worst}")
    ax1.axvline(d.f0_hz, color="C1", lw=0.8, ls=":")
    # Left of the line, below 0 dB: the low-pass curves fall to the right of f0 and would cross the label.
    ax1.annotate(f"f0 {d.f0_hz:,.0f} Hz", (d.f0_hz, 0), xytext=(-4, -16), textcoords="offset points", color="C1",
                 fontsize=8.5, ha="right")
    ax1.set_ylim(max(-100.0, float(ref.min()) - 5), max(3.0, float(ref.max()) + 3))
    ax1.set_ylabel("magnitude (dB)")
    ax1.set_xlabel("frequency (Hz)")
    ax1.set_xlim(f[0], f[-1])
    ax1.grid(True, which="both", alpha=0.3)
    ax1.legend(loc="lower left", fontsize=8.5)
    what = (f"f0 {d.f0_hz:,.0f} Hz, " + (f"Q {d.q:.3g}" if d.q else f"order {d.order}"
                                         + (f" {d.alignment}" if d.alignment else ""))
            + (f" + high-pass {d.highpass_hz:,.0f} Hz" if d.highpass_hz else ""))
    ax1.set_title(f"coefficients rounded to each format\n{what} at {d.rate_hz:,.0f} Hz ({d.method} method)",
                  fontsize=10)
    ax2.set_ylabel("|rounded − double| (dB)")
    ax2.set_xlabel("frequency (Hz)")
    ax2.set_ylim(1e-9, None)
    ax2.grid(True, which="both", alpha=0.3)
    ax2.legend(loc="lower left", fontsize=8.5, ncol=2)
    ax2.set_xlim(lo, hi)
    audio_ticks(ax1, f[0], f[-1])
    audio_ticks(ax2, lo, hi)
    fig.tight_layout()
    return fig
