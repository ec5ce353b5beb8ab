"""Listening: the original against filtered versions through the sound card, and blind (ABX) trials.

Rooms:

* :mod:`~audition.listen.sources`: the region of a file rendered once through each
  filter (and converted to the output's rate when that differs), with the gains
  that match their ITU-R BS.1770-4 loudness;
* :mod:`~audition.listen.engine`: the callback mixer (switching with an
  equal-power crossfade, loop, seek, pause, start ramp, limiter), pure and
  deterministic, driven by the device or by tests;
* :mod:`~audition.listen.abx`: ABX trials and their binomial statistics;
* :mod:`~audition.listen.screen`: the terminal screen and its keys;
* :mod:`~audition.listen.device`: the only place that imports sounddevice
  (PortAudio), lazily, so every other command works without it.

Nothing here is imported by ``audition --help``.
"""
