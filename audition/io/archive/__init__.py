"""Nothing of an archive file is lost: its chunks and tags carried over to a processed copy.

libsndfile writes the processed audio into the temporary file as before; then,
before the rename into place, :meth:`Carry.apply` puts the input's metadata back
around it, chunk by chunk, and records each one's fate (:class:`~audition.io.archive.inventory.Fate`):

- WAV, BWF, RF64, BW64: :mod:`audition.io.archive.wave` (the file is rebuilt in a
  second temporary file; the audio is copied by the kernel where it can);
- AIFF, AIFF-C: :mod:`audition.io.archive.aiff` (likewise);
- FLAC: :mod:`audition.io.archive.flac` (mutagen, in place).

A plain WAV whose only chunks are ``fmt `` and ``data`` (and ``fact``) comes out as
libsndfile wrote it: the rebuild is skipped when it would change nothing.

Other containers (CAF, AU, W64 outputs...) keep libsndfile's own handling of the
text fields; their inventory says what was not carried.
"""

from __future__ import annotations

import os

from audition.errors import OutputRefused
from audition.io.archive.inventory import Fate, dropped

#: Containers whose chunks audition carries over.
CARRIED = ("WAV", "WAVEX", "RF64", "AIFF", "FLAC")


def container_of(path) -> str | None:
    """``"wave"``, ``"aiff"`` or ``"flac"`` from a file's first bytes, else None."""
    from audition.io.archive.riff import sniff

    try:
        with open(path, "rb") as f:
            head = f.read(12)
    except OSError:
        return None
    if sniff(head):
        return "wave"
    if head[:4] == b"FORM" and head[8:12] in (b"AIFF", b"AIFC"):
        return "aiff"
    if head[:4] == b"fLaC":
        return "flac"
    return None


def is_broadcast_wave(path) -> bool:
    """True for a BWF (a WAVE file with a ``bext`` chunk) and for any RF64/BW64 file."""
    from audition.io.archive.riff import read_layout

    if container_of(path) != "wave":
        return False
    lay = read_layout(path)
    return lay.kind != b"RIFF" or lay.first(b"bext") is not None


class Carry:
    """The input's metadata, to be carried into one output.

    Parameters
    ----------
    in_path : str
    out_format : str
        The libsndfile container the output is written in (``"WAV"``, ``"RF64"``, ``"W64"``, ``"FLAC"``...).
    processing : str
        What this step did, for the coding-history line and the FLAC comment (free text,
        e.g. ``"audition 0.1.0;low-pass 1 section f0 9000 Hz Q 0.7071 bilinear;TPDF dither 24 bit"``).
    strict : bool
        Refuse (:class:`~audition.errors.OutputRefused`, before anything is written) when
        any chunk would be dropped.

    Attributes
    ----------
    kind : str or None
        ``"wave"``, ``"aiff"``, ``"flac"``, or None when the input's container is not carried.
    fates : list of Fate
        Planned at construction, replaced by what :meth:`apply` did.
    fmt : dict
        The output's format details (after :meth:`apply`).
    valid_bits : int or None
        The input's valid bits when fewer than its container's (WAVE_FORMAT_EXTENSIBLE), for
        a dither at the valid word length.
    """

    def __init__(self, in_path, *, out_format: str, processing: str, strict: bool = False, float_out: bool = False):
        self.in_path = os.fspath(in_path)
        self.out_format = out_format
        self.processing = processing
        self.strict = strict
        self.kind = container_of(self.in_path)
        self.fmt: dict = {}
        self.valid_bits = None
        self.seconds = 0.0
        if self.kind == "wave":
            from audition.io.archive import wave

            self.fates = wave.plan_fates(self.in_path, out_container=out_format, float_out=float_out)
            vb = wave.input_valid_bits(self.in_path)
            self.valid_bits = vb[0] if vb else None
            if out_format not in ("WAV", "WAVEX", "RF64"):
                self.kind = None
        elif self.kind == "aiff" and out_format == "AIFF":
            from audition.io.archive import aiff

            self.fates = aiff.plan_fates(self.in_path)
        elif self.kind == "flac" and out_format == "FLAC":
            from audition.io.archive import flac

            self.fates = flac.plan_fates(self.in_path)
        else:
            self.kind = None
            self.fates = []
        self.check_strict()

    @property
    def active(self) -> bool:
        return self.kind is not None

    def check_strict(self) -> None:
        gone = dropped(self.fates)
        if self.strict and gone:
            names = ", ".join(f"{f.chunk} ({f.reason})" for f in gone)
            raise OutputRefused(f"{self.in_path!r}: --strict-metadata: writing would drop {names}; "
                                "nothing was written (--no-strict-metadata writes it without them)")

    def coding_line(self, writer) -> str:
        from audition.io.archive import bext

        bits = writer.valid_bits or writer.bits or (64 if writer.subtype == "DOUBLE" else 32)
        return bext.coding_line(rate_hz=writer.rate_hz, bits=bits, channels=writer.channels,
                                float_samples=writer.bits is None, text=self.processing)

    def apply(self, tmp, writer):
        """Put the input's metadata around the audio in ``tmp`` (a closed libsndfile file); returns the temporary
        file to commit (``tmp`` itself, or a new one that replaces it)."""
        import time

        from audition.io.tempfiles import _TempFile

        t0 = time.perf_counter()
        try:
            if self.kind == "flac":
                from audition.io.archive import flac

                self.fates, self.fmt = flac.rebuild(self.in_path, tmp.name, self.coding_line(writer).strip())
                return tmp
            new = _TempFile(tmp.target, replace=tmp.replace)
            try:
                if self.kind == "wave":
                    from audition.io.archive import wave

                    self.fates, self.fmt, used = wave.rebuild(
                        self.in_path, tmp.fd, tmp.name, new.fd, frames=writer.stats.frames,
                        coding_line=self.coding_line(writer), true_peak_dbtp=writer.stats.true_peak_dbtp,
                        force_64=self.out_format == "RF64")
                else:
                    from audition.io.archive import aiff

                    self.fates, self.fmt, used = aiff.rebuild(self.in_path, tmp.fd, tmp.name, new.fd)
            except BaseException:
                new.remove()
                raise
            if not used:
                new.remove()
                return tmp
            tmp.remove()
            return new
        finally:
            self.seconds = time.perf_counter() - t0

    def to_list(self) -> list[dict]:
        return [f.to_dict() for f in self.fates]


__all__ = ["Carry", "Fate", "CARRIED", "container_of", "is_broadcast_wave"]
