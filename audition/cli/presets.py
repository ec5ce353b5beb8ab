"""``audition presets``: the starting points on offer, with their notes."""

from __future__ import annotations

import json

HELP = "list the bundled and user presets (starting points to audition, not rules)"


def add_parser(sub) -> None:
    p = sub.add_parser("presets", help=HELP, description=(HELP[0].upper() + HELP[1:]) + ". User presets in $AUDITION_PRESETS "
                       "or ~/.config/audition/presets override bundled ones of the same name.")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def describe(spec) -> str:
    if spec.sections:
        low = " + ".join(f"{f0:,.0f} Hz" + ("" if q is None else f" Q {q:.3g}") for f0, q in spec.sections)
    elif spec.alignment:
        low = f"{spec.f0_hz:,.0f} Hz, order {spec.order} {spec.alignment}"
    else:
        low = f"{spec.f0_hz:,.0f} Hz, order {spec.order}" + (f", Q {spec.q:.4g}" if spec.q else "")
    if spec.highpass_hz:
        low += f"; high-pass {spec.highpass_hz:,.0f} Hz"
    return low


def run(args) -> int:
    from audition.plan import presets

    found = presets.available()
    if args.json:
        print(json.dumps({"presets": [{"name": s.name, "note": s.note, "file": s.source, "filter": describe(s),
                                        "f0_hz": s.f0_hz, "q": s.q, "order": s.order, "alignment": s.alignment,
                                        "sections": [list(x) for x in s.sections], "method": s.method,
                                        "highpass_hz": s.highpass_hz} for s in found.values()],
                          "folders": [str(f) for f in presets.search_folders()]}, indent=2))
        return 0
    for s in found.values():
        print(f"{s.name:<18}{describe(s)}")
        print(f"{'':<18}{s.note}")
        print(f"{'':<18}({s.source})")
    print("Presets are starting points to audition on your own material, not rules.")
    return 0
