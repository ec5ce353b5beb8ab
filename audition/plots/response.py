"""Magnitude and phase of a design, analog against digital."""

from __future__ import annotations

import numpy as np

from audition.plots import pyplot, save_figure


def _db(h) -> np.ndarray:
    return 20.0 * np.log10(np.maximum(np.abs(h), 1e-12))


def plot_response(design, path) -> None:
    """Three panels on a log frequency axis (Hz), written as a PNG.

    1. magnitude in dB, analog prototype dashed, digital sections solid, with f0
       and the worst digital-minus-analog point of the deviation band marked;
    2. the deviation itself, digital minus analog magnitude in dB over the band
       20 Hz .. min(20 kHz, 0.45 rate), for every digitising method (this
       design's method solid, the others thin), each with its worst point;
    3. phase in degrees, analog dashed, digital solid.
    """
    from audition.design import METHODS

    plt = pyplot()
    nyq = design.rate_hz / 2.0
    f = np.geomspace(10.0, nyq * 0.999, 2000)
    ha, hd = design.analog_response(f), design.digital_response(f)
    mag_a, mag_d = _db(ha), _db(hd)
    fig_ = design.figures()
    lo, hi = fig_.deviation_band_hz
    f0 = design.f0_hz

    fig, (ax1, ax2, ax3) = plt.subplots(3, 1, figsize=(9, 9.5), sharex=True, height_ratios=(3, 1.6, 2))

    # -- magnitude ----------------------------------------------------------
    ax1.semilogx(f, mag_a, "--", color="0.3", lw=1.5, label="analog prototype")
    ax1.semilogx(f, mag_d, color="C0", lw=2, label=f"digital ({design.method}, {design.rate_hz:,.0f} Hz)")
    ax1.axvspan(lo, hi, color="C2", alpha=0.06, label=f"deviation band {lo:,.0f}–{hi:,.0f} Hz")
    fd = fig_.max_deviation_hz
    ya, yd = float(_db(design.analog_response(fd))), float(_db(design.digital_response(fd)))
    ax1.plot([fd, fd], [ya, yd], color="C3", lw=2)
    ax1.plot([fd], [yd], "o", color="C3")
    # the label goes to the side of the point with more room
    left = np.log(fd / f[0]) > np.log(f[-1] / fd)
    ax1.annotate(f"worst deviation {fig_.max_deviation_db:+.2f} dB\nat {fd:,.0f} Hz", (fd, (ya + yd) / 2),
                 xytext=(-12 if left else 12, 0), textcoords="offset points", ha="right" if left else "left",
                 va="center", color="C3", fontsize=9,
                 bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.85))
    bottom = max(-80.0, float(min(mag_d.min(), mag_a.min())) - 5)
    top = max(6.0, float(max(mag_d.max(), mag_a.max())) + 4)
    ax1.set_ylim(bottom, top)
    ax1.set_ylabel("magnitude (dB)")
    ax1.legend(loc="lower left", fontsize=9)
    title = f"low-pass f0 {f0:,.0f} Hz, order {design.order}"
    n_low = sum(s.kind == "lowpass" for s in design.sections)
    if design.alignment:
        title += f", {design.alignment.replace('-', '–').title()}"
        if design.ripple_db:
            title += f" ({design.ripple_db:g} dB ripple)"
    elif n_low > 1:
        title += f", a cascade of {n_low} sections"
    elif design.q:
        title += f", Q {design.q:.3g}"
    if design.highpass_hz:
        title += f", high-pass {design.highpass_hz:,.0f} Hz"
    ax1.set_title(title + f"; sampled at {design.rate_hz:,.0f} Hz")

    # -- deviation of every method -----------------------------------------
    band = np.geomspace(lo, hi, 1500)
    analog_band = _db(design.analog_response(band))
    for i, m in enumerate(METHODS):
        dm = design if m == design.method else design.with_method(m)
        dev = _db(dm.digital_response(band)) - analog_band
        mine = m == design.method
        dev_db, dev_hz = (fig_.max_deviation_db, fig_.max_deviation_hz) if mine else dm.max_deviation()
        colour = "C0" if mine else f"C{4 + i}"
        ax2.semilogx(band, dev, color=colour, lw=2 if mine else 1.2, ls="-" if mine else "--",
                     label=f"{m}{' (this design)' if mine else ''}: worst {dev_db:+.2f} dB at {dev_hz:,.0f} Hz")
        ax2.plot([dev_hz], [dev_db], "o", color="C3" if mine else colour, ms=5)
    ax2.axhline(0.0, color="0.3", lw=0.8)
    ax2.set_ylabel("digital − analog (dB)")
    ax2.legend(loc="lower left", fontsize=8.5)

    # -- phase ----------------------------------------------------------------
    ax3.semilogx(f, np.degrees(np.unwrap(np.angle(ha))), "--", color="0.3", lw=1.5, label="analog prototype")
    ax3.semilogx(f, np.degrees(np.unwrap(np.angle(hd))), color="C0", lw=2, label=f"digital ({design.method})")
    ax3.set_ylabel("phase (degrees)")
    ax3.set_xlabel("frequency (Hz)")
    ax3.legend(loc="lower left", fontsize=9)
    ax3.set_xlim(f[0], f[-1])

    from audition.plots import audio_ticks

    for ax in (ax1, ax2, ax3):
        audio_ticks(ax, f[0], f[-1])
        ax.grid(True, which="both", alpha=0.3)
        ax.axvline(f0, color="C1", lw=1, ls=":")
    # f0 named once, inside the top panel, on the side of the line with room for it
    right_room = np.log(f[-1] / f0) > 0.25 * np.log(f[-1] / f[0])
    ax1.text(f0 * (1.04 if right_room else 0.96), 0.97, f"f0 = {f0:,.0f} Hz", transform=ax1.get_xaxis_transform(),
             color="C1", ha="left" if right_room else "right", va="top", fontsize=9,
             bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.85))
    fig.tight_layout()
    save_figure(fig, path)
