"""Plan and preset files: a filter choice written down so it can be reused.

A plan or preset is a small TOML file of our own layout (read with :mod:`tomllib`)::

    name = "cassette-ferric"
    note = "A starting point to audition, not a rule."

    [lowpass]
    f0_hz = 10000.0        # cutoff, Hz
    q = 0.7071             # second order only; or:
    # order = 4
    # alignment = "bessel"  # butterworth | bessel | linkwitz-riley
    # or an explicit cascade:
    # sections = [{ f0_hz = 9000.0, q = 0.54 }, { f0_hz = 9000.0, q = 1.31 }]
    method = "bilinear"    # or "matched"
    gain_db = 0.0

    [highpass]             # optional rumble filter
    f0_hz = 30.0

A file written by ``audition plan --save`` adds a ``[predicted]`` table and the
survey it came from; those are informative and ignored on reading.

Presets are looked up by name, first in the folder named by ``AUDITION_PRESETS``,
then in the user's config folder (``$XDG_CONFIG_HOME/audition/presets`` or
``~/.config/audition/presets``), then among the bundled presets; a user preset
overrides a bundled one of the same name.
"""

from __future__ import annotations

import math
import os
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from audition.errors import BadInputFile, BadParameter

from audition.design.checks import ALIGNMENTS, METHODS

LOWPASS_KEYS = {"f0_hz", "q", "order", "alignment", "ripple_db", "sections", "method", "gain_db"}
TOP_KEYS = {"name", "note", "lowpass", "highpass", "predicted", "survey", "audition_version", "written_utc"}


@dataclass(frozen=True)
class FilterSpec:
    """A filter as a plan or preset states it, independent of any sample rate.

    ``design(rate_hz)`` digitises it for a particular file.
    """

    name: str
    note: str = ""
    f0_hz: float | None = None
    q: float | None = None
    order: int = 2
    alignment: str | None = None
    sections: tuple[tuple[float, float | None], ...] = ()
    method: str = "bilinear"
    gain_db: float = 0.0
    highpass_hz: float | None = None
    source: str = ""
    extra: dict = field(default_factory=dict, compare=False)
    ripple_db: float | None = None

    def design(self, rate_hz: float):
        """The :class:`~audition.design.Design` of this filter at ``rate_hz``."""
        from audition import design

        if self.sections:
            return design.from_sections(self.sections, rate_hz, gain_db=self.gain_db, method=self.method,
                                        highpass_hz=self.highpass_hz)
        return design.lowpass(self.f0_hz, rate_hz, q=self.q, order=self.order, alignment=self.alignment,
                              gain_db=self.gain_db, method=self.method, highpass_hz=self.highpass_hz,
                              ripple_db=self.ripple_db)

    @classmethod
    def from_design(cls, d, name: str, note: str = "") -> FilterSpec:
        """The spec of a design (as the planner chose it)."""
        lows = [s for s in d.sections if s.kind == "lowpass"]
        if d.alignment is None and d.order == 2 and len(lows) == 1:
            return cls(name, note, f0_hz=d.f0_hz, q=d.q, order=2, method=d.method, gain_db=d.passband_gain_db,
                       highpass_hz=d.highpass_hz)
        if d.alignment is not None:
            return cls(name, note, f0_hz=d.f0_hz, order=d.order, alignment=d.alignment, method=d.method,
                       gain_db=d.passband_gain_db, highpass_hz=d.highpass_hz, ripple_db=d.ripple_db)
        return cls(name, note, sections=tuple((s.f0_hz, s.q) for s in lows), method=d.method,
                   gain_db=d.passband_gain_db, highpass_hz=d.highpass_hz)

    def to_toml(self, predicted: dict | None = None, survey: dict | None = None) -> str:
        """The file text (our own layout, see the module docstring)."""
        from audition import __version__

        lines = [f"name = {_toml_str(self.name)}", f"note = {_toml_str(self.note)}",
                 f"audition_version = {_toml_str(__version__)}", "", "[lowpass]"]
        if self.sections:
            rows = ", ".join("{ f0_hz = %s%s }" % (_num(f0), "" if q is None else f", q = {_num(q)}")
                             for f0, q in self.sections)
            lines.append(f"sections = [{rows}]")
        else:
            lines.append(f"f0_hz = {_num(self.f0_hz)}")
            if self.alignment:
                lines += [f"order = {self.order}", f"alignment = {_toml_str(self.alignment)}"]
                if self.ripple_db is not None:
                    lines.append(f"ripple_db = {_num(self.ripple_db)}")
            elif self.order != 2:
                lines.append(f"order = {self.order}")
            else:
                lines.append(f"q = {_num(self.q if self.q is not None else 1 / math.sqrt(2))}")
        lines += [f"method = {_toml_str(self.method)}", f"gain_db = {_num(self.gain_db)}"]
        if self.highpass_hz is not None:
            lines += ["", "[highpass]", f"f0_hz = {_num(self.highpass_hz)}"]
        for title, table in (("predicted", predicted), ("survey", survey)):
            if table:
                lines += ["", f"[{title}]"] + _toml_table(table)
        return "\n".join(lines) + "\n"


def _num(x) -> str:
    return repr(float(x))


def _toml_str(s: str) -> str:
    return '"' + str(s).replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return _num(v) if isinstance(v, float) else str(v)
    if isinstance(v, str):
        return _toml_str(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_toml_value(x)}" for k, x in v.items() if x is not None) + " }"
    raise TypeError(f"cannot write {v!r} to TOML")


def _key(k) -> str:
    k = str(k)
    return k if k.replace("_", "").isalnum() and not k[0].isdigit() else _toml_str(k)


def _toml_table(d: dict) -> list[str]:
    return [f"{_key(k)} = {_toml_value(v)}" for k, v in d.items() if v is not None]


def parse_spec(data: dict, source: str) -> FilterSpec:
    """Validate a parsed plan/preset table; errors name the file, the field and what is allowed."""

    def bad(fieldname, why):
        return BadInputFile(f"{source}: field {fieldname!r} {why}")

    unknown = set(data) - TOP_KEYS
    if unknown:
        raise bad(sorted(unknown)[0], f"is not known here; allowed top-level fields are {', '.join(sorted(TOP_KEYS))}")
    name = data.get("name", Path(source).stem)
    if not isinstance(name, str) or not name:
        raise bad("name", "must be a non-empty string")
    note = data.get("note", "")
    if not isinstance(note, str):
        raise bad("note", "must be a string")
    low = data.get("lowpass")
    if not isinstance(low, dict):
        raise bad("lowpass", "is missing: a [lowpass] table with f0_hz (and q, or order and alignment) or sections")
    unknown = set(low) - LOWPASS_KEYS
    if unknown:
        raise bad(f"lowpass.{sorted(unknown)[0]}", f"is not known; allowed are {', '.join(sorted(LOWPASS_KEYS))}")

    def number(table, key, prefix, default=None, positive=True):
        v = table.get(key, default)
        if v is None:
            return None
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or (positive and v <= 0):
            raise bad(f"{prefix}.{key}", f"= {v!r} must be a {'positive ' if positive else ''}number")
        return float(v)

    method = low.get("method", "bilinear")
    if method not in METHODS:
        raise bad("lowpass.method", f"= {method!r}; allowed are {', '.join(METHODS)}")
    gain_db = number(low, "gain_db", "lowpass", 0.0, positive=False)
    sections: tuple = ()
    f0 = q = alignment = ripple_db = None
    order = 2
    if "sections" in low:
        if {"f0_hz", "q", "order", "alignment", "ripple_db"} & set(low):
            raise bad("lowpass.sections", "gives the whole cascade: leave out f0_hz, q, order, alignment and ripple_db")
        rows = low["sections"]
        if not isinstance(rows, list) or not rows:
            raise bad("lowpass.sections", "must be a non-empty list of { f0_hz = ..., q = ... }")
        out = []
        for i, row in enumerate(rows):
            if not isinstance(row, dict) or "f0_hz" not in row or set(row) - {"f0_hz", "q"}:
                raise bad(f"lowpass.sections[{i}]", "must be { f0_hz = HZ, q = Q } (q left out: first order)")
            out.append((number(row, "f0_hz", f"lowpass.sections[{i}]"), number(row, "q", f"lowpass.sections[{i}]")))
        sections = tuple(out)
    else:
        f0 = number(low, "f0_hz", "lowpass")
        if f0 is None:
            raise bad("lowpass.f0_hz", "is missing: the cutoff in Hz")
        q = number(low, "q", "lowpass")
        order = low.get("order", 2)
        if isinstance(order, bool) or not isinstance(order, int) or not 1 <= order <= 12:
            raise bad("lowpass.order", f"= {order!r} must be an integer from 1 to 12")
        alignment = low.get("alignment")
        if alignment is not None and alignment not in ALIGNMENTS:
            raise bad("lowpass.alignment", f"= {alignment!r}; allowed are {', '.join(ALIGNMENTS)}")
        if q is not None and (alignment is not None or order != 2):
            raise bad("lowpass.q", "applies to one second-order section: leave it out with order/alignment")
        ripple_db = number(low, "ripple_db", "lowpass")
        if (ripple_db is not None) != (alignment == "chebyshev"):
            raise bad("lowpass.ripple_db", "goes with alignment = \"chebyshev\", and that alignment needs it")
    high = data.get("highpass")
    highpass_hz = None
    if high is not None:
        if not isinstance(high, dict) or set(high) - {"f0_hz"} or "f0_hz" not in high:
            raise bad("highpass", "must be a table with f0_hz only")
        highpass_hz = number(high, "f0_hz", "highpass")
    return FilterSpec(name, note, f0, q, order, alignment, sections, method, gain_db, highpass_hz, source,
                      {k: data[k] for k in ("predicted", "survey") if k in data}, ripple_db)


def load(path) -> FilterSpec:
    """Read and validate a plan or preset file."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise BadInputFile(f"{path}: no such plan or preset file") from None
    except OSError as exc:
        raise BadInputFile(f"{path}: cannot read ({exc.strerror})") from None
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise BadInputFile(f"{path}: not a valid TOML plan ({exc})") from None
    return parse_spec(data, str(path))


def check_design(spec: FilterSpec, rate_hz: float, path=None):
    """``spec.design(rate_hz)`` with a parameter error turned into one naming the files.

    ``path`` is the sound file the design is for: its rate sets the limits (Nyquist),
    so the message names it and the rate, then the plan or preset file if any.
    """
    try:
        return spec.design(rate_hz)
    except BadParameter as exc:
        where = [f"{os.fspath(path)!r} at {rate_hz:g} Hz" if path is not None else "", spec.source]
        raise BadParameter(f"{', '.join(w for w in where if w) or spec.name}: {exc}") from None


def bundled_folder() -> Path:
    """The presets folder shipped beside the package (top level of the source tree)."""
    return Path(__file__).resolve().parents[2] / "presets"


def search_folders() -> list[Path]:
    """Preset folders in the order a name is looked up: user folders first."""
    folders = []
    env = os.environ.get("AUDITION_PRESETS")
    if env:
        folders.append(Path(env))
    config = os.environ.get("XDG_CONFIG_HOME") or os.path.join(os.path.expanduser("~"), ".config")
    folders.append(Path(config) / "audition" / "presets")
    folders.append(bundled_folder())
    return folders


def available() -> dict[str, FilterSpec]:
    """Every preset by name, user presets overriding bundled ones of the same name."""
    found: dict[str, FilterSpec] = {}
    for folder in reversed(search_folders()):
        if folder.is_dir():
            for p in sorted(folder.glob("*.toml")):
                spec = load(p)
                found[spec.name] = spec
    return dict(sorted(found.items()))


def find(name: str) -> FilterSpec:
    """The preset called ``name``."""
    presets = available()
    if name not in presets:
        raise BadParameter(f"preset={name!r}: no such preset; available are {', '.join(presets) or 'none'}")
    return presets[name]
