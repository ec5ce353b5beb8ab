"""The main job as a library: survey, plan, render, measure and report one file.

``audition render`` and the batch runner both call :func:`render_job`; nothing
here parses arguments or prints. The chain::

    survey_path ──► plan_path (auto) ──► predict ──► render_file ──► measure_render ──► report
     (streaming)     (from spectra)      (spectra)    (streaming,     (streaming, input
                                                       atomic)         and output paired)

Errors the user can cause are :class:`~audition.errors.AuditionError`
subclasses, and a failed job leaves nothing behind: the outputs are checked
before anything is read, the render is atomic, and if the measurement or the
report fails after the render, the output and its sidecar written by this job
are removed again.

The measurement after a render lives in :mod:`audition.verify`.
"""

from __future__ import annotations

import math
import os
from dataclasses import asdict, dataclass

import numpy as np

from audition.errors import BadInputFile, BadParameter, OutputRefused
from audition.verify import measure_render


@dataclass(frozen=True)
class NoiseReference:
    """Where the hiss alone is.

    Attributes
    ----------
    spans : tuple of (start_s, end_s), optional
        Stretches of hiss alone in the file, seconds.
    clip : str, optional
        A separate noise-only recording (same rate and channel count).
    margin_db : float
        Crossover margin, dB (see :func:`audition.survey.programme.crossover`): the programme must stand
        this far above the hiss for a band to count as heard.
    treble_from_hz : float
        Lowest band whose cut counts as treble loss, Hz.
    listening_level_db : float
        The SPL at which a full-scale sine would play (default 100 dB SPL, common practice for
        calibrated monitoring, not a standard): what is heard depends on it.

    With neither ``spans`` nor ``clip`` the noise reference is found
    automatically from the quietest frames.
    """

    spans: tuple[tuple[float, float], ...] | None = None
    clip: str | None = None
    margin_db: float = 0.0
    treble_from_hz: float = 2000.0
    listening_level_db: float = 100.0
    accept_doubtful: bool = False

    def to_dict(self) -> dict:
        return {"spans": None if self.spans is None else [list(s) for s in self.spans], "clip": self.clip,
                "margin_db": float(self.margin_db), "treble_from_hz": float(self.treble_from_hz),
                "listening_level_db": float(self.listening_level_db), "accept_doubtful": bool(self.accept_doubtful)}


@dataclass(frozen=True)
class PlanSettings:
    """What an automatic choice plans with (see :func:`audition.plan.plan`)."""

    budget_db: float = 1.0
    weighting: str = "itu468"
    orders: tuple[int, ...] = (1, 2, 3, 4, 5, 6, 7, 8)
    method: str = "bilinear"
    max_peak_db: float = 1.5
    max_overshoot_pct: float = 15.0
    highpass_hz: float | None = None
    objective: str = "heard"

    def to_dict(self) -> dict:
        d = asdict(self)
        d["orders"] = [int(o) for o in self.orders]
        return d


# ---------------------------------------------------------------------------
# Survey and plan of a file
# ---------------------------------------------------------------------------


def survey_path(path, noise: NoiseReference | None = None, *, threads: bool = True, progress=None):
    """Survey the file at ``path`` against ``noise`` in one streaming pass (flat memory).

    With ``threads`` (default) a second thread reads ahead; without, all in this thread.
    ``progress(frames_done, frames_total)``, optional, is called after each block.

    Returns
    -------
    audition.survey.onepass.Survey

    Raises
    ------
    BadInputFile, BadParameter
        An unreadable file, a bad span, a noise clip of another rate or channel count,
        no quiet frames for the automatic search, digital silence.
    """
    from audition.io import reader
    from audition.survey.onepass import survey_blocks

    noise = noise or NoiseReference()
    inf = reader.info(path)
    noise_blocks = noise_rate = None
    if noise.clip:
        ninf = reader.info(noise.clip)
        if ninf.channels != inf.channels:
            raise BadParameter(f"{noise.clip}: the noise clip has {ninf.channels} channel(s), "
                               f"{path} has {inf.channels}; they must agree")
        noise_blocks, noise_rate = reader.blocks(noise.clip), ninf.rate_hz
    return survey_blocks(reader.counted(reader.blocks(path, ahead=threads), inf.frames, progress), inf.rate_hz,
                         inf.channels, frames=inf.frames,
                         noise_spans=None if noise.spans is None else list(noise.spans),
                         noise_blocks=noise_blocks, noise_rate_hz=noise_rate,
                         margin_db=noise.margin_db, name=str(path),
                         noise_name=str(noise.clip) if noise.clip else None)


def check_evidence(path, survey, noise: NoiseReference) -> None:
    """Refuse to plan on a doubtful noise reference found automatically, unless it was accepted.

    Raises
    ------
    BadInputFile
        The automatic search's reference has a "low" confidence grade: the spans it found,
        why they are doubtful, and how to give a reference.
    """
    conf = survey.confidence
    if survey.noise_source != "auto" or conf.grade != "low" or noise.accept_doubtful:
        return
    spans = ", ".join(f"{a:.2f}:{b:.2f}" for a, b in survey.spans[:4]) + (" ..." if len(survey.spans) > 4 else "")
    raise BadInputFile(f"{path}: the noise reference found automatically is doubtful ({'; '.join(conf.doubts())}; "
                       f"spans {spans or 'none'} s): --auto will not plan on it; give --noise-span START:END over "
                       "hiss alone or --noise-clip FILE, or --accept-doubtful-noise to plan with these spans")


def plan_survey(survey, noise: NoiseReference | None = None, settings: PlanSettings | None = None):
    """The plan for a survey already made (no file access)."""
    from audition import plan

    noise = noise or NoiseReference()
    settings = settings or PlanSettings()
    return plan.plan(survey.hearing_bands, budget_db=settings.budget_db, objective=settings.objective,
                     weighting=settings.weighting, orders=tuple(settings.orders), method=settings.method,
                     treble_from_hz=noise.treble_from_hz, margin_db=noise.margin_db,
                     listening_level_db=noise.listening_level_db, crossover_hz=survey.crossover_hz,
                     highpass_hz=settings.highpass_hz, max_peak_db=settings.max_peak_db,
                     max_overshoot_pct=settings.max_overshoot_pct,
                     extra_warnings=plan.noise_warnings(survey))


def predict(survey, design, noise: NoiseReference | None = None) -> dict:
    """What ``design`` is predicted to do to the surveyed file: the heard figures and the weighted SNR.

    The keys: ``treble_loss_db`` and ``treble_loss_hz`` (the largest cut where the programme is
    heard, :mod:`audition.plan.audible`), ``hiss_heard`` (``before_sone``, ``after_sone``,
    ``reduction_pct``, per-band audible shares), ``snr_gain_db`` per weighting, and the
    weighted hiss levels and the response at 10 and 15 kHz of :func:`audition.measure.predict`
    (whose share-of-treble-power figure is kept as ``treble_power_share_lost_db``).
    """
    from audition import measure
    from audition.plan.choose import judge

    noise = noise or NoiseReference()
    old = measure.predict(survey.freqs_hz, survey.programme_psd, survey.noise_psd, design,
                          treble_from_hz=noise.treble_from_hz).to_dict()
    c = judge(survey.hearing_bands, design, listening_level_db=noise.listening_level_db, margin_db=noise.margin_db,
              treble_from_hz=noise.treble_from_hz, snr_gain_db=old["snr_gain_db"])
    out = c.predicted()
    out["hiss_heard"] = c.hiss_heard.to_dict()
    out["treble_power_share_lost_db"] = old.pop("treble_loss_db")
    for key in ("treble_from_hz", "response_db", "noise_before_dbfs", "noise_after_dbfs", "noise_reduction_db"):
        out[key] = old[key]
    out["listening_level_db"] = noise.listening_level_db
    out["band_cut_db"] = {"bands_hz": [float(f) for f in survey.hearing_bands.centres_hz],
                          "programme": [float(x) for x in c.cut_db], "hiss": [float(x) for x in c.noise_cut_db]}
    return out


def plan_path(path, noise: NoiseReference | None = None, settings: PlanSettings | None = None):
    """Survey the file at ``path`` and plan a filter for it: ``(Survey, Plan)``."""
    survey = survey_path(path, noise)
    return survey, plan_survey(survey, noise, settings)


# ---------------------------------------------------------------------------
# Settings of a job (what a resumed batch compares)
# ---------------------------------------------------------------------------


def spec_settings(spec) -> dict:
    """The fields of a :class:`~audition.plan.presets.FilterSpec` that decide the filter (not where it came from)."""
    return {"name": spec.name, "f0_hz": spec.f0_hz, "q": spec.q, "order": int(spec.order),
            "alignment": spec.alignment, "sections": [[float(f0), q] for f0, q in spec.sections],
            "method": spec.method, "gain_db": float(spec.gain_db), "highpass_hz": spec.highpass_hz}


def job_settings(*, spec=None, auto: PlanSettings | None = None, noise: NoiseReference | None = None,
                 subtype: str | None = None, dither: bool = True, seed: int = 0) -> dict:
    """A JSON-able dict that fully describes a requested job.

    Two jobs with equal settings on the same input give the same output bytes
    (the render is deterministic for a seed), so a resumed batch can skip a file
    whose sidecar holds equal ``"settings"``.
    """
    if (spec is None) == (auto is None):
        raise BadParameter("a job needs exactly one filter source: a filter spec or automatic planning")
    return {
        "filter": spec_settings(spec) if spec is not None else None,
        "auto": auto.to_dict() if auto is not None else None,
        "noise": noise.to_dict() if noise is not None else None,
        "subtype": subtype,
        "dither": bool(dither),
        "seed": int(seed),
    }


def render_summary(r, d) -> dict:
    """The JSON object of one render (what ``audition render --json`` prints)."""
    dd = d.to_dict()
    return {
        "input": r.input,
        "output": r.output,
        "sidecar": r.sidecar,
        "rate": r.rate_hz,
        "channels": r.channels,
        "format": r.format,
        "subtype": r.subtype,
        "input_subtype": r.input_subtype,
        "frames": r.frames,
        "duration_seconds": r.audio_seconds,
        "f0_hz": dd["f0_hz"],
        "q": dd["q"],
        "order": dd["order"],
        "alignment": dd["alignment"],
        "highpass_hz": dd["highpass_hz"],
        "sections": dd["sections"],
        "method": r.method,
        "dither": {"kind": "tpdf" if r.dither else "none", "peak_lsb": 1.0 if r.dither else 0.0,
                   "bits": r.dither_bits, "seed": r.seed},
        "peak_dbfs": r.peak_dbfs,
        "true_peak_dbtp": r.true_peak_dbtp,
        "clipped_samples": r.clipped_samples,
        "trim_db": r.trim_db,
        "input_sha256": r.input_sha256,
        "output_sha256": r.output_sha256,
        "metadata": list(r.metadata),
        "seconds": r.seconds,
        "realtime_factor": r.realtime_factor,
    }


def jsonable(obj):
    """``obj`` with numpy scalars made plain and non-finite floats made None (strict JSON)."""
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return float(obj) if math.isfinite(obj) else None
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    return obj


def render_job(in_path, out_path, *, spec=None, auto: PlanSettings | None = None,
               noise: NoiseReference | None = None, subtype: str | None = None, dither: bool = True, seed: int = 0,
               overwrite: bool = False, progress=None, report_path=None, provenance: dict | None = None,
               threads: bool = True, container: str | None = None, strict_metadata: bool | None = None,
               accept_truncated: bool = False, figures_optional: bool = False) -> dict:
    """Survey, plan (with ``auto``), render, measure and report one file.

    Parameters
    ----------
    in_path, out_path : str or os.PathLike
        The input is only read; the output gets a sidecar ``OUT.json``.
    spec : audition.plan.presets.FilterSpec, optional
        The filter (from a plan or preset file, or explicit options).
    auto : PlanSettings, optional
        Plan the filter from the survey instead. Exactly one of ``spec`` and ``auto``.
    noise : NoiseReference, optional
        Where the hiss alone is. With it (or with ``auto`` or ``report_path``,
        which need a survey and then default to the automatic noise reference)
        the result holds the prediction and the measurement.
    subtype, dither, seed, overwrite, progress
        As :func:`audition.render.render_file`.
    report_path : str, optional
        Write one self-contained HTML page there after the render succeeded.
    provenance : dict, optional
        More keys for the sidecar (e.g. the batch run that rendered the file).
    container, strict_metadata
        As :func:`audition.render.render_file` (archive metadata).
    threads : bool
        Read ahead and write behind in helper threads (default True, for one
        file on a machine to itself); False keeps the survey, the render and
        the measurement in this thread (one core's work, for a batch worker).
        The results are the same.
    accept_truncated : bool
        Render an input whose header declares more frames than it holds (what it
        holds), recorded in the sidecar's "input"; by default it is refused.
    figures_optional : bool
        With ``spec`` and no report: a survey or measurement that cannot be made
        (no quiet frames...) leaves the figures out, the reason in "figures_missing"
        (result and sidecar), instead of failing the job (a batch's choice).

    Returns
    -------
    dict
        :func:`render_summary`'s keys, plus "settings"; with a survey "survey",
        "predicted", "measured" and "warnings"; with ``auto`` "plan"; with
        ``report_path`` "report". The sidecar holds "settings" and, as they
        apply, "survey", "plan", "predicted" and "measured".

    Raises
    ------
    AuditionError
        BadParameter, BadInputFile or OutputRefused; nothing is left behind.
    """
    from audition.io import reader, writer
    from audition.io.sidecar import PreparedText, SidecarWriter, sidecar_path
    from audition.plan import presets
    from audition.io.commit import commit_together, finished_path
    from audition.render import render_file

    if (spec is None) == (auto is None):
        raise BadParameter("give exactly one filter source: a filter (spec) or automatic planning (auto)")
    if accept_truncated:
        with reader.accept_truncated(in_path):
            return render_job(in_path, out_path, spec=spec, auto=auto, noise=noise, subtype=subtype, dither=dither,
                              seed=seed, overwrite=overwrite, progress=progress, report_path=report_path,
                              provenance=provenance, threads=threads, container=container,
                              strict_metadata=strict_metadata, figures_optional=figures_optional)
    in_path, out_path = os.fspath(in_path), os.fspath(out_path)
    side_path = sidecar_path(out_path)
    # Refuse every output before reading anything: a job fails early or not at all.
    # every file the job reads: the recording, the noise clip, the plan or preset file
    inputs = [in_path] + [p for p in (noise.clip if noise is not None else None,
                                      getattr(spec, "source", None)) if p]
    writer.check_output_path(out_path, inputs=inputs, overwrite=overwrite)
    writer.check_output_path(side_path, inputs=inputs, overwrite=overwrite)
    if report_path is not None:
        report_path = os.fspath(report_path)
        for other in (out_path, side_path):
            if writer.same_file(report_path, other) or os.path.abspath(report_path) == os.path.abspath(other):
                raise OutputRefused(f"{report_path!r}: the report would overwrite {other!r}; name another file")
        writer.check_output_path(report_path, inputs=inputs, overwrite=overwrite)
    info = reader.info(in_path)
    if noise is None and (auto is not None or report_path is not None):
        noise = NoiseReference()
    settings = job_settings(spec=spec, auto=auto, noise=noise, subtype=subtype, dither=dither, seed=seed)

    phases = [p for p, on in (("surveying", noise is not None), ("planning", auto is not None), ("rendering", True),
                              ("measuring", noise is not None), ("writing the report", report_path is not None)) if on]
    phase = _phase_announcer(progress, phases)
    survey = pl = None
    # with a fixed filter and no report the figures are extras: one that cannot be made is left out
    optional = figures_optional and auto is None and report_path is None
    figures_missing = None
    if noise is not None:
        try:
            survey = survey_path(in_path, noise, threads=threads, progress=phase("surveying"))
        except (BadInputFile, BadParameter) as exc:
            if not optional:
                raise
            survey, figures_missing = None, f"no figures: {exc}"
    if auto is not None:
        phase("planning")
        check_evidence(in_path, survey, noise)
        pl = plan_survey(survey, noise, auto)
        if pl.choice is None:
            return _no_filter(in_path, pl, survey, settings, report_path, provenance)
        d = pl.choice.design
        filter_source = {"kind": "auto"}
    else:
        d = presets.check_design(spec, info.rate_hz, in_path)
        filter_source = {"kind": "spec", "name": spec.name, "file": spec.source or None}

    record = {"settings": settings, "filter_source": filter_source, **(provenance or {})}
    if figures_missing:
        record["figures_missing"] = figures_missing
    predicted = None
    if survey is not None:
        predicted = predict(survey, d, noise)
        record["survey"] = survey.to_dict()
        record["predicted"] = predicted
    if pl is not None:
        record["plan"] = compact_plan(pl)
    record = jsonable(record)

    # The output and its sidecar stay in their temporary files until the measurement and the
    # report are ready too; then all of them are put in place as one unit (commit_together),
    # so a failure or a signal on the way leaves the files an --overwrite would replace untouched.
    held: list = []
    r = render_file(in_path, out_path, d, subtype=subtype, dither=dither, seed=seed, overwrite=overwrite,
                    progress=phase("rendering"), record_extra=record, threads=threads,
                    container=container, strict_metadata=strict_metadata, hold=held)
    try:
        out = render_summary(r, d)
        out.update(record)
        side = held[1]
        measured = None
        if survey is not None:
            try:
                measured = measure_render(in_path, finished_path(held[0]), d, survey, noise, threads=threads,
                                          progress=phase("measuring"))
            except (BadInputFile, BadParameter) as exc:
                if not optional:
                    raise
                out["figures_missing"] = side.record["figures_missing"] = f"no measurement: {exc}"
        if measured is not None or out.get("figures_missing") != record.get("figures_missing"):
            sidecar = side.record
            if measured is not None:
                out["measured"] = jsonable(measured)
                out["warnings"] = list(pl.warnings) if pl is not None else _survey_warnings(survey)
                sidecar["measured"] = out["measured"]
            side.abort()
            held[1] = side = SidecarWriter(side_path, sidecar)
            side.record = sidecar
        if report_path is not None:
            from audition import report

            phase("writing the report")
            held.append(PreparedText(report_path, report.render_page(out, side.record, survey, pl, d), "report"))
            out["report"] = report_path
        commit_together(held)
    except BaseException:
        # The render succeeded but the job did not: nothing of it is put in place.
        for item in held:
            item.abort()
        raise
    return jsonable(out)


def _phase_announcer(progress, phases):
    """``phase(name)`` -> the progress callable for that phase of a job.

    A ``progress`` with a ``phase(name, index, count)`` method is told each phase as it
    starts (a bar can then show "[2/4] rendering"); a plain callable is used for the
    rendering alone, as before.
    """
    def phase(name):
        announce = getattr(progress, "phase", None)
        if announce is not None:
            announce(name, phases.index(name) + 1, len(phases))
            return progress
        return progress if name == "rendering" else None
    return phase


def _no_filter(in_path, pl, survey, settings, report_path, provenance) -> dict:
    """The job's result when the plan says no filter: nothing rendered, the reason given (and reported)."""
    out = {"input": os.fspath(in_path), "output": None, "sidecar": None, "choice": None,
           "no_filter_reason": pl.no_filter_reason, "settings": settings, "survey": survey.to_dict(),
           "plan": compact_plan(pl), "warnings": list(pl.warnings), **(provenance or {})}
    if report_path is not None:
        from audition import report

        report.write(report_path, report.render_page(out, None, survey, pl, None))
        out["report"] = report_path
    return jsonable(out)


def compact_plan(pl) -> dict:
    """The plan for a sidecar: the choice in full, the trade-off without section coefficients."""
    def brief(c):
        d = c.design
        return {"label": c.label, "f0_hz": d.f0_hz, "q": d.q, "order": d.order, "alignment": d.alignment,
                "ripple_db": d.ripple_db, "predicted": c.predicted()}

    full = pl.to_dict()
    full["candidates"] = [brief(c) for c in pl.front]
    full["alternatives"] = [brief(c) for c in pl.alternatives]
    return full


def _survey_warnings(survey) -> list[str]:
    from audition.plan import noise_warnings

    return noise_warnings(survey)


__all__ = ["NoiseReference", "PlanSettings", "survey_path", "plan_survey", "plan_path",
           "job_settings", "measure_render", "render_job", "render_summary", "compact_plan", "jsonable"]
