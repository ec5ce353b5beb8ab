"""The fate of each chunk or metadata block of an input: carried, rewritten, added or dropped."""

from __future__ import annotations

from dataclasses import dataclass

FATES = ("carried", "rewritten", "added", "dropped")


@dataclass(frozen=True)
class Fate:
    """What became of one chunk or metadata block.

    Attributes
    ----------
    chunk : str
        Its name: a RIFF/AIFF chunk id (``"bext"``, ``"LIST INFO"``, ``"MARK"``) or a FLAC
        block (``"VORBIS_COMMENT"``, ``"PICTURE"``); a Vorbis comment as ``"VORBIS_COMMENT KEY"``.
    fate : str
        One of :data:`FATES`: carried byte for byte, rewritten on purpose, added, dropped.
    reason : str
        Why, for rewritten, added and dropped ones.
    size_bytes : int
    extra : tuple of (str, str)
        More keys for its record, values verbatim (e.g. ``("input_vendor", ...)``: the vendor
        string of the input's VORBIS_COMMENT block, which the output's replaces).
    """

    chunk: str
    fate: str
    reason: str = ""
    size_bytes: int = 0
    extra: tuple = ()

    def to_dict(self) -> dict:
        d = {"chunk": self.chunk, "fate": self.fate, "reason": self.reason, "size_bytes": int(self.size_bytes)}
        d.update(self.extra)
        return d


def dropped(fates) -> list[Fate]:
    return [f for f in fates if f.fate == "dropped"]
