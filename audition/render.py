"""The streaming engine: reader -> second-order sections -> dither/quantise -> atomic writer.

A file of any length goes through in blocks of :data:`~audition.io.formats.BLOCK_FRAMES`
frames with the filter state carried from block to block (``zi`` in, ``zf``
out), so the result is that of one pass over the whole signal and the memory
used does not grow with the length of the file. Reading, filtering and writing
overlap in three threads; libsndfile and the compiled loops of
:mod:`audition.kernels` (filter, dither and quantisation, PCM byte conversion)
release the GIL, so the threads run side by side. The writing thread also
meters the true peak of what it writes (:mod:`audition.truepeak`); with its exact
screen that costs about 1.4 ms of CPU per 65,536-frame stereo block on the
benchmark's signal with the C kernels (2.5 ms with the numpy ones), where a full
4x interpolation would cost more than the rest of the render.

Nothing here parses arguments or prints; :mod:`audition.cli.render` does.
"""

from __future__ import annotations

import os
import queue
import threading
import time
from dataclasses import dataclass

from audition import __version__, interrupt
from audition.errors import BadInputFile, BadParameter
from audition.io.formats import BLOCK_FRAMES, OUTPUT_SUBTYPES
from audition.io.reader import AudioReader
from audition.io.sidecar import SidecarWriter, sidecar_path, utc_now_iso
from audition.io.threads import END, get_unless_stopped, put_unless_stopped, read_ahead
from audition.io.commit import commit_together
from audition.io.tempfiles import remove_leftover_parts
from audition.io.writer import AtomicWriter, check_output_path
from audition.streamfilter import StreamingFilter

#: Blocks in flight between two threads; bounds the memory (a few MiB).
QUEUE_DEPTH = 4


@dataclass(frozen=True)
class RenderResult:
    """What one render did.

    Attributes
    ----------
    input, output, sidecar : str
        Paths (sidecar None when none was written).
    rate_hz : float
    channels : int
    format, subtype, input_subtype : str
        Output container and subtype; the input's subtype.
    frames : int
        Frames written.
    sections : int
        Second-order (or first-order) sections applied.
    method : str
    dither : bool
        True when TPDF dither was added (integer outputs with dither on).
    dither_bits : int or None
        Output word length the dither is scaled to (None for float outputs).
    seed : int
    peak_dbfs : float or None
        Sample peak of the written output, dBFS (full scale = 0 dBFS); not a
        true-peak (inter-sample) reading. None for digital silence.
    clipped_samples : int
        Samples beyond full scale (saturated for integer outputs, kept in float ones).
    trim_db : float
        Level reduction that would have kept every sample within full scale.
    input_sha256 : str
    seconds : float
        Wall time of the render: reading, filtering, writing and the sidecar (the one-off
        import of scipy.signal left out).
    realtime_factor : float
        Duration of the audio divided by ``seconds``.
    true_peak_dbtp : float or None
        True peak of the written output, dBTP (0 dBTP = full scale): ITU-R BS.1770-4
        Annex 2, 4x oversampled, measured on the samples as written (after dither,
        rounding and saturation); see :mod:`audition.truepeak`. Never below
        ``peak_dbfs``. None for digital silence.
    """

    input: str
    output: str
    sidecar: str | None
    rate_hz: float
    channels: int
    format: str
    subtype: str
    input_subtype: str
    frames: int
    sections: int
    method: str
    dither: bool
    dither_bits: int | None
    seed: int
    peak_dbfs: float | None
    clipped_samples: int
    trim_db: float
    input_sha256: str
    seconds: float
    realtime_factor: float
    true_peak_dbtp: float | None = None
    metadata: tuple = ()
    output_sha256: str | None = None

    @property
    def audio_seconds(self) -> float:
        return self.frames / self.rate_hz


def output_subtype(reader_subtype: str, subtype: str | None, fmt: str, in_path: str) -> str:
    """The subtype to write: the input's unless one is asked for; refuse one audition cannot write."""
    if subtype is not None:
        return subtype
    if reader_subtype not in OUTPUT_SUBTYPES:
        from audition.io.formats import check_output_subtype

        fits = []
        for st in OUTPUT_SUBTYPES:
            try:
                check_output_subtype(st, fmt, in_path)
                fits.append(st)
            except BadParameter:
                pass
        if not fits:
            # OGG, MP3...: the output keeps the input's container, and audition writes none of its encodings
            raise BadInputFile(f"{in_path!r}: its {fmt} {reader_subtype} encoding is read but cannot be written, and "
                               "the output keeps the input's container; decode the input to a WAV or FLAC file first "
                               "(no further loss) and render that")
        raise BadInputFile(f"{in_path!r}: its {fmt} {reader_subtype} encoding is read but not written by audition; "
                           f"give --subtype ({', '.join(fits)})")
    return reader_subtype


def render_file(in_path, out_path, design, *, subtype: str | None = None, dither: bool = True, seed: int = 0,
                overwrite: bool = False, sidecar: bool = True, block_frames: int = BLOCK_FRAMES,
                progress=None, record_extra: dict | None = None, threads: bool = True,
                container: str | None = None, strict_metadata: bool | None = None, hold: list | None = None
                ) -> RenderResult:
    """Filter a sound file into a new one, streaming, atomically, with a sidecar record.

    Parameters
    ----------
    in_path, out_path : str or os.PathLike
        The input is only read; the output must be another file.
    design : audition.design.Design
        Its ``rate_hz`` must be the file's rate (see :func:`audition.io.reader.info`).
    subtype : str, optional
        Output subtype (default: the input's). The container is always the input's.
    dither : bool
        TPDF dither of +-1 LSB at the output word length for integer outputs.
    seed : int
        Seed of the dither generator: the same inputs give the same bytes.
    overwrite : bool
        Replace an existing output (and sidecar); never the input.
    sidecar : bool
        Write ``OUT.json`` beside the output (default True).
    block_frames : int
        Frames per block; the result does not depend on it.
    progress : callable, optional
        ``progress(frames_done, frames_total)``, called from this thread after each block.
    record_extra : dict, optional
        More keys for the sidecar (e.g. the plan or preset a design came from).
    threads : bool
        Overlap reading, filtering and writing (default True); False runs
        everything in this thread (same output).
    container : {None, "wav", "rf64", "w64"}
        For WAVE inputs: the output's container (default: the input's, and RF64 when a
        WAV output would pass 4 GiB).
    strict_metadata : bool, optional
        Refuse to write when any chunk of the input would be dropped (default: True
        for Broadcast Wave and RF64/BW64 inputs, False otherwise); see :mod:`audition.io.archive`.
    hold : list, optional
        Leave the finished output and sidecar uncommitted: append their writers
        (:class:`AtomicWriter`, then :class:`SidecarWriter` with its ``record``) to
        this list, for the caller to commit with other files by
        :func:`audition.io.commit.commit_together` (or abort). The output's finished bytes
        are then in ``audition.io.commit.finished_path(hold[0])``.

    Returns
    -------
    RenderResult

    Raises
    ------
    BadInputFile, BadParameter, OutputRefused
        With nothing left behind: no output, no sidecar, no temporary file.
    """
    in_path, out_path = os.fspath(in_path), os.fspath(out_path)
    if block_frames < 1:
        raise BadParameter(f"block_frames={block_frames!r}: must be at least 1")
    side_path = sidecar_path(out_path) if sidecar else None
    # refuse a bad output before opening anything, so the message names the real problem
    check_output_path(out_path, inputs=[in_path], overwrite=overwrite)
    if side_path is not None:
        check_output_path(side_path, inputs=[in_path], overwrite=overwrite)
    remove_leftover_parts(out_path, side_path)  # what a killed render of this output left (no live run's)
    with AudioReader(in_path, hash_input=True) as reader:
        if abs(design.rate_hz - reader.rate_hz) > 1e-9 * reader.rate_hz:
            raise BadParameter(f"{in_path!r}: the design is for {design.rate_hz:g} Hz but the file is at "
                               f"{reader.rate_hz:g} Hz; design it with the file's rate")
        out_subtype = output_subtype(reader.subtype, subtype, reader.format, in_path)
        side = None
        # the input's chunks and tags, carried into the output (audition.io.archive, issue 15)
        out_format = output_container(reader, out_subtype, container, in_path)
        carry = _carry(in_path, out_format, strict_metadata, out_subtype in ("FLOAT", "DOUBLE"))
        # shielded: a signal between the making of the temporary file and the try below would leave it behind
        with interrupt.shielded(raise_at_end=False):
            writer = AtomicWriter(out_path, reader.rate_hz, reader.channels, format=out_format,
                                  subtype=out_subtype, overwrite=overwrite, inputs=[in_path],
                                  metadata=None if carry.active else reader.metadata, dither=dither, seed=seed,
                                  frames_hint=reader.frames, carry=carry,
                                  valid_bits=carry.valid_bits if out_subtype == reader.subtype else None)
            carry.processing = processing_text(design, writer)
        try:
            interrupt.check()
            filt = StreamingFilter(design.sos, reader.channels)
            # timed from here: scipy's one-off import (about a second) says nothing of the render
            t0 = time.perf_counter()
            run = _run_threaded if threads else _run_serial
            run(reader, filt, writer, block_frames, progress)
            writer.finish()
            stats = writer.stats
            _check_whole(reader, stats.frames)
            sha = reader.sha256()
            out_sha = None
            if side_path is not None:
                record = sidecar_record(reader, writer, design, sha, dither=dither, seed=seed)
                arch = archive_record(writer, carry, design)
                record["output"].update(arch.pop("output"))
                out_sha = record["output"]["sha256"]
                record.update(arch)
                if reader.info.frames_declared is not None:  # --accept-truncated: the record says so
                    record["input"].update(frames_declared=reader.info.frames_declared, truncated_accepted=True)
                if record_extra:
                    record.update(record_extra)
                side = SidecarWriter(side_path, record)
                side.record = record
            if hold is not None:
                hold += [writer] + ([side] if side is not None else [])  # the caller commits or aborts them
            else:
                commit_together([writer] + ([side] if side is not None else []))
        except BaseException:
            writer.abort()
            if side is not None:
                side.abort()
            raise
        seconds = time.perf_counter() - t0
        q = writer.quantiser
        return RenderResult(
            input=in_path, output=out_path, sidecar=side_path, rate_hz=reader.rate_hz, channels=reader.channels,
            format=out_format, subtype=out_subtype, input_subtype=reader.subtype, frames=stats.frames,
            sections=len(design.sos), method=design.method, dither=bool(q is not None and q.dither),
            dither_bits=None if q is None else q.bits, seed=seed, peak_dbfs=stats.peak_dbfs,
            clipped_samples=stats.clipped_samples, trim_db=stats.trim_db, input_sha256=sha, seconds=seconds,
            realtime_factor=(stats.frames / reader.rate_hz) / seconds if seconds > 0 else float("inf"),
            true_peak_dbtp=stats.true_peak_dbtp, metadata=tuple(f.to_dict() for f in carry.fates),
            output_sha256=out_sha)


# ---------------------------------------------------------------------------
# Archive metadata (issue 15): container, carried chunks, fixity of the output
# ---------------------------------------------------------------------------

#: ``--container`` values and the libsndfile container each writes.
CONTAINERS = {"wav": "WAV", "rf64": "RF64", "w64": "W64"}


def output_container(reader, out_subtype: str, container: str | None, in_path: str) -> str:
    """The libsndfile container of the output: the input's; RF64 for a WAV that would pass 4 GiB; or ``container``."""
    from audition.io.formats import INTEGER_BITS

    fmt = reader.format
    if container is not None:
        if container not in CONTAINERS:
            raise BadParameter(f"container={container!r}: allowed are {', '.join(CONTAINERS)}")
        if fmt not in ("WAV", "WAVEX", "RF64", "W64"):
            raise BadParameter(f"{in_path!r}: --container applies to WAV inputs; this one is {fmt}")
        want = CONTAINERS[container]
        return "WAVEX" if want == "WAV" and fmt == "WAVEX" else want
    width = INTEGER_BITS.get(out_subtype, 64 if out_subtype == "DOUBLE" else 32) // 8
    if fmt in ("WAV", "WAVEX") and reader.frames * reader.channels * width + 65536 > 2**32 - 1:
        return "RF64"  # EBU Tech 3306: a WAVE file past 4 GiB
    return fmt


def _carry(in_path, out_format, strict, float_out):
    from audition.io.archive import Carry, is_broadcast_wave

    if strict is None:
        strict = is_broadcast_wave(in_path)
    return Carry(in_path, out_format=out_format, processing="", strict=strict, float_out=float_out)


def processing_text(design, writer) -> str:
    """This step in words for the coding history (EBU R 98's free text T) and FLAC's PROCESSING comment."""
    d = design.to_dict()
    n = len(d.get("sections") or ())
    parts = [f"audition {__version__}"]
    shape = f"low-pass {n} section{'s' if n != 1 else ''} {d.get('method') or design.method}"
    if d.get("f0_hz"):
        shape += f" f0 {d['f0_hz']:g} Hz"
    if d.get("q"):
        shape += f" Q {d['q']:.4g}"
    if d.get("alignment"):
        shape += f" {d['alignment']} order {d.get('order')}"
    parts.append(shape)
    if d.get("highpass_hz"):
        parts.append(f"high-pass {d['highpass_hz']:g} Hz")
    q = writer.quantiser
    if q is None:
        parts.append(f"{writer.subtype.lower()} samples no dither")
    elif q.dither:
        parts.append(f"TPDF dither {q.bits} bit")
    else:
        parts.append(f"rounded to {q.bits} bit without dither")
    return ";".join(parts)


def archive_record(writer, carry, design) -> dict:
    """The sidecar's archive keys: the output's fixity and format, the chunk inventory, the software."""
    import soundfile as sf

    from audition.io.reader import sha256_file

    tmp = writer._tmp.name  # the finished file, renamed into place unchanged by commit()
    fmt = dict(carry.fmt)
    if not fmt:
        from audition.io.archive.wave import fmt_of

        fmt = (fmt_of(tmp) if carry.kind is None and writer.format in ("WAV", "WAVEX", "RF64") else None) or {}
    fmt.update(valid_bits=writer.valid_bits or writer.bits, dither_bits=None if writer.quantiser is None
               else writer.quantiser.bits)
    try:
        gd = float(design.group_delay_s(1000.0)) if 1000.0 < design.rate_hz / 2 else None
    except Exception:  # a design without a group delay figure: the record says so
        gd = None
    if carry.active:
        # the text fields went with their chunks (byte for byte): "metadata" says so, chunk by chunk
        copied = {"metadata_copied": [], "metadata_rewritten": []}
    else:
        # libsndfile wrote them: a field is copied only when it reads back as it was ("software" gets a mark)
        try:
            with sf.SoundFile(tmp) as f:
                back = f.copy_metadata()
        except (sf.LibsndfileError, RuntimeError):
            back = {}
        meta = writer.metadata_given
        copied = {"metadata_copied": sorted(k for k in writer.metadata_written if back.get(k) == meta.get(k)),
                  "metadata_rewritten": sorted(k for k in writer.metadata_written if back.get(k) != meta.get(k))}
    return {
        "output": {"sha256": sha256_file(tmp), "size_bytes": os.path.getsize(tmp), "fmt": fmt, **copied},
        "metadata": [f.to_dict() for f in carry.fates],
        "metadata_carried_by": "audition.io.archive" if carry.active else "libsndfile text fields",
        "libsndfile_version": sf.__libsndfile_version__,
        "group_delay_1khz_s": gd,
        "group_delay_1khz_samples": None if gd is None else gd * design.rate_hz,
    }


# ---------------------------------------------------------------------------
# Committing: whole files only, all of a job's files or none (issue 16)
# ---------------------------------------------------------------------------


def _check_whole(reader, frames_written: int) -> None:
    """Refuse to commit unless every frame the input declares was read and written."""
    from audition import interrupt

    interrupt.check()  # a read cut short by a signal is an interrupt, not a short file
    if reader.frames_read != reader.frames or frames_written != reader.frames:
        raise BadInputFile(f"{reader.path!r}: {reader.frames_read} frames read and {frames_written} written of the "
                           f"{reader.frames} its header declares; nothing was kept")


def sidecar_record(reader, writer, design, sha256: str, *, dither: bool, seed: int) -> dict:
    """The archive record of one render: what went in, what was done, what came out."""
    stats = writer.stats
    q = writer.quantiser
    if q is None:
        dither_rec = {"kind": "none", "reason": f"{writer.subtype} is a float subtype"}
    elif q.dither:
        dither_rec = {"kind": "tpdf", "peak_lsb": 1.0, "bits": q.bits, "seed": seed, "generator": "numpy PCG64"}
    else:
        dither_rec = {"kind": "none", "reason": "turned off", "bits": q.bits}
    info = reader.info
    return {
        "audition_version": __version__,
        "processed_utc": utc_now_iso(),
        "input": {
            "path": os.path.abspath(info.path), "size_bytes": info.size_bytes, "sha256": sha256,
            "format": info.format, "subtype": info.subtype, "rate_hz": info.rate_hz, "channels": info.channels,
            "frames": info.frames,
        },
        "output": {
            "path": os.path.abspath(writer.path), "format": writer.format, "subtype": writer.subtype,
            "frames": stats.frames, "metadata_copied": sorted(writer.metadata_written),
        },
        "design": design.to_dict(),
        "dither": dither_rec,
        "peak_dbfs": stats.peak_dbfs,
        "peak_kind": "sample peak of the written output, full scale = 0 dBFS",
        "true_peak_dbtp": stats.true_peak_dbtp,
        "true_peak_kind": "true peak of the written output, ITU-R BS.1770-4 Annex 2 (4x oversampled, "
                          "the input samples included), full scale = 0 dBTP",
        "clipped_samples": stats.clipped_samples,
        "trim_db": stats.trim_db,
    }


# ---------------------------------------------------------------------------
# The two ways of running the chain (same output)
# ---------------------------------------------------------------------------


def _run_serial(reader, filt, writer, block_frames, progress):
    done = 0
    for x in reader.blocks(block_frames):
        writer.write_quantised(writer.quantise(filt(x)))
        done += len(x)
        if progress is not None:
            progress(done, reader.frames)


def _run_threaded(reader, filt, writer, block_frames, progress):
    """Reading ahead in one thread -> this thread (filter, quantise) -> writer thread.

    Each hand-over is a bounded queue, so at most a few blocks are in flight;
    a failure on any side stops the others and is raised here.
    """
    import contextlib

    q_out: queue.Queue = queue.Queue(QUEUE_DEPTH)
    stop = threading.Event()
    write_error: list[BaseException] = []

    def write_loop():
        try:
            while True:
                item = get_unless_stopped(q_out, stop)
                if item is END:
                    return
                writer.write_quantised(item)
        except BaseException as exc:
            write_error.append(exc)
            stop.set()

    write_thread = threading.Thread(target=write_loop, name="audition-write", daemon=True)
    write_thread.start()
    done = 0
    try:
        with contextlib.closing(read_ahead(reader, block_frames, QUEUE_DEPTH)) as blocks:
            for x in blocks:
                if not put_unless_stopped(q_out, writer.quantise(filt(x)), stop):
                    break
                done += len(x)
                if progress is not None:
                    progress(done, reader.frames)
        put_unless_stopped(q_out, END, stop)
        write_thread.join()
    finally:
        stop.set()
        write_thread.join()
    if write_error:
        raise write_error[0]
