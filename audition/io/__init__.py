"""Sound files in and out: the only package that touches soundfile (libsndfile).

Where each job lives (each module's docstring says more):

``formats``
    The format policy: the subtypes an output may have (:data:`~audition.io.formats.OUTPUT_SUBTYPES`),
    the container an output name asks for, the text fields libsndfile carries,
    the streaming block size, and which files audition packs and unpacks itself.
``reader``
    Reading: :func:`~audition.io.reader.read_clip` (a whole short file),
    :func:`~audition.io.reader.blocks` (streaming), :func:`~audition.io.reader.info`
    (the header), :class:`~audition.io.reader.AudioReader` (the checked block reader
    that hashes the input as it reads), :func:`~audition.io.reader.sha256_file`.
``threads``
    Handing blocks between threads: :func:`~audition.io.threads.read_ahead` (a
    second thread decodes ahead) and the queue helpers the renderer's writing
    thread uses too.
``quantise``
    :class:`~audition.io.quantise.Quantiser`: TPDF dither, rounding and saturation
    to an integer word length.
``writer``
    Writing: :func:`~audition.io.writer.write_clip`, :class:`~audition.io.writer.AtomicWriter`
    (temporary file, rename into place when complete, metering), the checks an
    output must pass (not an input, not existing unless overwriting, room on the disk).
``tempfiles``
    The temporary file beside its target every atomic write goes through, and the
    clean-up of those a killed run left behind.
``sidecar``
    Small text files written atomically: the JSON sidecar beside an output,
    reports, headers.
``messages``
    One-line wording of operating-system and libsndfile failures.

Three tiers, as in python-soundfile: simple functions (``read_clip``,
``write_clip``), a generator of blocks (``blocks``), and the classes they wrap
(``AudioReader``, ``AtomicWriter``). Everything a user can get wrong raises an
:class:`~audition.errors.AuditionError` with one line naming the file and the
problem. Nothing half-written is ever left: the temporary file is removed on any
failure, ``KeyboardInterrupt`` included.

This file imports nothing, so ``import audition.io`` costs nothing (soundfile and
numpy load with the module that needs them); import names from their module, e.g.
``from audition.io.reader import AudioReader`` or ``from audition.io import writer``.
"""
