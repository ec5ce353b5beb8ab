"""Magnitude and phase of a design, analog against digital."""

from __future__ import annotations

import numpy as np

from audition.plots import pyplot, save_figure


def plot_response(design, path) -> None:
    """Two panels on log frequency: magnitude (dB) and phase (degrees).

    Analog response dashed, digital solid; f0 and the worst digital-minus-analog
    point of the deviation band are marked.
    """
    plt = pyplot()
    nyq = design.rate_hz / 2.0
    f = np.geomspace(10.0, nyq * 0.999, 2000)
    ha, hd = design.analog_response(f), design.digital_response(f)
    mag_a, mag_d = 20 * np.log10(np.abs(ha)), 20 * np.log10(np.maximum(np.abs(hd), 1e-12))
    fig_ = design.figures()

    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(9, 7), sharex=True, height_ratios=(3, 2))
    ax1.semilogx(f, mag_a, "--", color="0.35", lw=1.5, label="analog prototype")
    ax1.semilogx(f, mag_d, color="C0", lw=2, label=f"digital ({design.method}, {design.rate_hz:,.0f} Hz)")
    lo, hi = fig_.deviation_band_hz
    ax1.axvspan(lo, hi, color="C2", alpha=0.06, label=f"deviation band {lo:,.0f}–{hi:,.0f} Hz")
    f0 = design.f0_hz
    ax1.axvline(f0, color="C1", lw=1, ls=":")
    ax1.annotate(f"f0 = {f0:,.0f} Hz", (f0, 0), xytext=(5, 8), textcoords="offset points", color="C1")
    fd = fig_.max_deviation_hz
    ya = 20 * np.log10(abs(design.analog_response(fd)))
    yd = 20 * np.log10(max(abs(design.digital_response(fd)), 1e-12))
    ax1.plot([fd, fd], [ya, yd], color="C3", lw=2)
    ax1.plot([fd], [yd], "o", color="C3")
    ax1.annotate(f"worst deviation {fig_.max_deviation_db:+.2f} dB\nat {fd:,.0f} Hz", (fd, yd), xytext=(-150, -30),
                 textcoords="offset points", color="C3", arrowprops=dict(arrowstyle="->", color="C3"))
    top = max(6.0, float(mag_d.max()) + 3)
    ax1.set_ylim(max(-80.0, float(min(mag_d.min(), mag_a.min())) - 5), top)
    ax1.set_ylabel("magnitude (dB)")
    ax1.grid(True, which="both", alpha=0.3)
    ax1.legend(loc="lower left", fontsize=9)
    title = f"low-pass f0 {f0:,.0f} Hz, order {design.order}"
    title += f", {design.alignment}" if design.alignment else (f", Q {design.q:.3g}" if design.q else "")
    if design.highpass_hz:
        title += f", high-pass {design.highpass_hz:,.0f} Hz"
    ax1.set_title(title)

    ax2.semilogx(f, np.degrees(np.unwrap(np.angle(ha))), "--", color="0.35", lw=1.5, label="analog")
    ax2.semilogx(f, np.degrees(np.unwrap(np.angle(hd))), color="C0", lw=2, label="digital")
    ax2.axvline(f0, color="C1", lw=1, ls=":")
    ax2.set_ylabel("phase (degrees)")
    ax2.set_xlabel("frequency (Hz)")
    ax2.grid(True, which="both", alpha=0.3)
    ax2.legend(loc="lower left", fontsize=9)
    ax2.set_xlim(f[0], f[-1])
    fig.tight_layout()
    save_figure(fig, path)
