"""Golden renders: the samples of a fixed set of renders are pinned by their SHA-256.

These pins guard behaviour across refactoring: moving code between modules must not change
one bit of what is rendered. The inputs are made here from a counter-based generator
(numpy's PCG64 raw 64-bit output, whose stream is fixed by its published algorithm), not
from the bundled clips, so remaking the demo clips does not move them. The pinned values
were recorded from the code before the package layout changed; a deliberate change to the
rendering (a new dither, a new design rule) updates them in its own commit, saying why.
"""

from __future__ import annotations

import hashlib

import numpy as np
import pytest
import soundfile as sf

from audition.cli import main


def _programme(frames: int, channels: int, rate_hz: float, seed: int) -> np.ndarray:
    """Three partials, a decaying burst and uniform noise: deterministic to the bit."""
    raw = np.random.PCG64(seed).random_raw(frames * channels)
    noise = (raw >> np.uint64(11)).astype(np.float64) / float(1 << 53) - 0.5  # uniform [-0.5, 0.5)
    noise = noise.reshape(frames, channels)
    t = np.arange(frames)[:, None] / rate_hz
    tone = (0.2 * np.sin(2 * np.pi * 440.0 * t) + 0.08 * np.sin(2 * np.pi * 3150.0 * t)
            + 0.03 * np.sin(2 * np.pi * 11000.0 * t))
    burst = np.exp(-t * 8.0) * noise
    return 0.9 * tone + 0.2 * burst + 0.01 * noise


def _samples_sha256(path) -> str:
    info = sf.info(str(path))
    dtype = "float32" if info.subtype in ("FLOAT", "DOUBLE") else "int32"
    data, _ = sf.read(str(path), dtype=dtype, always_2d=True)
    return hashlib.sha256(f"{info.samplerate}:{info.channels}:{info.subtype}".encode() + data.tobytes()).hexdigest()


GOLDEN = [
    # (name, input (rate, channels, subtype, seed), render options, SHA-256 of the output's samples)
    ("biquad-16bit-dither", (44100, 2, "PCM_16", 1), ["--f0", "9000", "--q", "0.8", "--seed", "3"],
     "9051a8f30b53769719a5252fa5b070e1114b647c618be6d2676375a04d5304d5"),
    ("butterworth4-highpass-24bit", (48000, 1, "PCM_24", 2),
     ["--order", "4", "--alignment", "butterworth", "--f0", "5000", "--highpass", "30", "--seed", "5"],
     "3a1abd740f6f191b61e535754ff3639e8748d8d0eb6793c641f694575aeeb43d"),
    ("free-sections-float", (44100, 2, "FLOAT", 3), ["--section", "8000:0.6", "--section", "8000:1.2"],
     "2c083b2eb773e767129607ad459403ba3ca6fae40993a8d9b81013ebbb28aaca"),
    ("biquad-16bit-no-dither", (44100, 1, "PCM_16", 4), ["--f0", "6000", "--q", "0.5", "--no-dither"],
     "7fa3e09b021e4c83b6e9465c442fac490f5f74d193d6a595cbd0326dafd2bab4"),
]


@pytest.mark.parametrize("name,source,options,expected", GOLDEN, ids=[g[0] for g in GOLDEN])
def test_render_is_bit_identical_to_the_pinned_output(tmp_path, name, source, options, expected):
    rate_hz, channels, subtype, seed = source
    src = tmp_path / "in.wav"
    sf.write(str(src), _programme(int(1.5 * rate_hz), channels, rate_hz, seed), rate_hz, subtype=subtype)
    out = tmp_path / "out.wav"
    assert main(["render", str(src), str(out), "--quiet", *options]) == 0
    assert _samples_sha256(out) == expected
