"""Who and what: the options that record a transfer's details in the sidecar and the report.

``render`` (and anything else that writes a sidecar) adds them with
:func:`add_record_options` and hands :func:`record_provenance` to the job: the
fields go into the sidecar under ``"transfer"`` (``carrier_id``, ``operator``,
``playback_chain``, ``note``; only those given) and an attached ABX session
log under ``"abx"`` (its summary, counted again from its answers, and its SHA-256).
"""

from __future__ import annotations

#: (option, sidecar key, help), in the order the report prints them.
FIELDS = (
    ("--carrier-id", "carrier_id", "the carrier's identifier in your archive (tape, disc or cylinder number)"),
    ("--operator", "operator", "who made the transfer and this render"),
    ("--playback-chain", "playback_chain", "the replay machine, head, EQ, converter... as you describe them"),
    ("--note", "note", "anything else to file with the transfer (one line)"),
)


def add_record_options(p) -> None:
    g = p.add_argument_group("record (written to the sidecar and the report)")
    for opt, key, text in FIELDS:
        g.add_argument(opt, dest=key, metavar="TEXT", help=text)
    g.add_argument("--abx-log", metavar="FILE.json", help="attach an ABX session log of `audition listen --blind`: "
                   "its trials, right answers and p-value (counted again from its answers) and its SHA-256")


def record_provenance(args) -> dict | None:
    """The sidecar keys from the record options: "transfer" and "abx" as given; None if none was.

    Raises
    ------
    BadParameter
        A field is empty or holds a line break (the report shows each on one line).
    BadInputFile
        The ABX log cannot be read or is not one.
    """
    from audition.errors import BadParameter

    transfer = {}
    for opt, key, _ in FIELDS:
        v = getattr(args, key, None)
        if v is None:
            continue
        if not v.strip() or "\n" in v or "\r" in v:
            raise BadParameter(f"{opt}={v!r}: give one line of text")
        transfer[key] = v.strip()
    out = {}
    if transfer:
        out["transfer"] = transfer
    if getattr(args, "abx_log", None):
        from audition.report import abx_summary

        out["abx"] = abx_summary(args.abx_log)
    return out or None
