"""Magnitude and phase of a design, analog against digital."""

from __future__ import annotations

import numpy as np

from audition.plots import mark_line, place_line_labels, pyplot, save_figure


def _db(h) -> np.ndarray:
    return 20.0 * np.log10(np.maximum(np.abs(h), 1e-12))


def _minus3(f, mag):
    """The first frequency where ``mag`` (dB) falls through -3.01 dB, interpolated on log f; None if it never does."""
    below = np.nonzero(mag <= -3.01)[0]
    if not below.size or below[0] == 0:
        return None
    i = below[0]
    t = (-3.01 - mag[i - 1]) / (mag[i] - mag[i - 1])
    return float(np.exp(np.log(f[i - 1]) + t * (np.log(f[i]) - np.log(f[i - 1]))))


def response_figure(design):
    """Four panels on a log frequency axis (Hz).

    1. magnitude in dB, analog prototype dashed, digital solid, with f0 and the
       digital -3.01 dB (half-power) point marked;
    2. the passband close up (-4 dB up to the peak), so ripple and droop can be read;
    3. the deviation, digital minus analog magnitude, for every digitising method
       (this design's solid), over 20 Hz .. min(20 kHz, 0.45 rate); the passband
       (analog above -3.01 dB), where a deviation changes what the filter keeps,
       is shaded and its worst point given beside the whole band's;
    4. phase in degrees, analog dashed, digital solid.
    """
    from audition.design import METHODS
    from audition.plots import audio_ticks

    plt = pyplot()
    nyq = design.rate_hz / 2.0
    f = np.geomspace(10.0, nyq * 0.999, 2000)
    ha, hd = design.analog_response(f), design.digital_response(f)
    mag_a, mag_d = _db(ha), _db(hd)
    fig_ = design.figures()
    lo, hi = fig_.deviation_band_hz
    f0 = design.f0_hz
    m3 = fig_.minus3db_hz if fig_.minus3db_hz else _minus3(f, mag_d)
    pass_hi = _minus3(f, mag_a) or hi

    fig, (ax1, axp, ax2, ax3) = plt.subplots(4, 1, figsize=(9, 12.5), sharex=True, height_ratios=(3, 1.8, 1.8, 1.8))

    # -- magnitude ----------------------------------------------------------
    ax1.semilogx(f, mag_a, "--", color="0.3", lw=1.5, label="analog prototype")
    ax1.semilogx(f, mag_d, color="C0", lw=2, label=f"digital ({design.method}, {design.rate_hz:,.0f} Hz)")
    ax1.axhline(-3.01, color="0.6", lw=0.8)
    if m3:
        ax1.plot([m3], [-3.01], "o", color="C3", ms=6, zorder=5,
                 label=f"digital half-power point: -3.01 dB at {m3:,.0f} Hz")
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

    # -- the passband close up ------------------------------------------------
    axp.semilogx(f, mag_a, "--", color="0.3", lw=1.5)
    axp.semilogx(f, mag_d, color="C0", lw=2)
    axp.axhline(-3.01, color="0.6", lw=0.8)
    axp.axhline(0.0, color="0.3", lw=0.6)
    if m3:
        axp.plot([m3], [-3.01], "o", color="C3", ms=6, zorder=5)
    peak = float(max(mag_d.max(), mag_a.max()))
    axp.set_ylim(-4.0, max(0.5, peak + 0.5))
    axp.set_ylabel("passband (dB)")
    axp.text(0.01, 0.06, "close up: ripple, droop and the -3.01 dB line", transform=axp.transAxes, fontsize=8.5,
             color="0.35", va="bottom", bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.85))

    # -- deviation of every method -----------------------------------------
    band = np.geomspace(lo, hi, 1500)
    analog_band = _db(design.analog_response(band))
    in_pass = band <= pass_hi
    ax2.axvspan(lo, min(pass_hi, hi), color="C2", alpha=0.10, lw=0,
                label=f"passband {lo:,.0f}–{min(pass_hi, hi):,.0f} Hz: a deviation here changes what is kept")
    for i, m in enumerate(METHODS):
        dm = design if m == design.method else design.with_method(m)
        dev = _db(dm.digital_response(band)) - analog_band
        mine = m == design.method
        dev_db, dev_hz = (fig_.max_deviation_db, fig_.max_deviation_hz) if mine else dm.max_deviation()
        pw = int(np.argmax(np.abs(np.where(in_pass, dev, 0.0))))
        colour = "C0" if mine else f"C{4 + i}"
        ax2.semilogx(band, dev, color=colour, lw=2 if mine else 1.2, ls="-" if mine else "--",
                     label=f"{m}{' (this design)' if mine else ''}: passband worst {dev[pw]:+.2f} dB; "
                           f"whole band {dev_db:+.2f} dB at {dev_hz:,.0f} Hz")
        ax2.plot([dev_hz], [dev_db], "o", color=colour, ms=4)
    ax2.axhline(0.0, color="0.3", lw=0.8)
    ax2.set_ylabel("digital − analog (dB)")
    ax2.legend(loc="lower left", fontsize=8)

    # -- phase ----------------------------------------------------------------
    ax3.semilogx(f, np.degrees(np.unwrap(np.angle(ha))), "--", color="0.3", lw=1.5, label="analog prototype")
    ax3.semilogx(f, np.degrees(np.unwrap(np.angle(hd))), color="C0", lw=2, label=f"digital ({design.method})")
    ax3.set_ylabel("phase (degrees)")
    ax3.set_xlabel("frequency (Hz)")
    ax3.legend(loc="lower left", fontsize=9)
    ax3.set_xlim(f[0], f[-1])

    for ax in (ax1, axp, ax2, ax3):
        audio_ticks(ax, f[0], f[-1])
        ax.grid(True, which="both", alpha=0.3)
        ax.axvline(f0, color="C1", lw=1, ls=":")
    fig.tight_layout()
    mark_line(ax1, f0, f"f0 = {f0:,.0f} Hz", "C1")
    place_line_labels(ax1)
    return fig


def plot_response(design, path) -> None:
    """:func:`response_figure` written as a PNG."""
    save_figure(response_figure(design), path)
