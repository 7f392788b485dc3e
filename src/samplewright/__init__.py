"""Samplewright: audition sampling presets for a team's writing assistant.

Public API (stable names): :class:`Preset`, :class:`PresetError` and
:func:`shape`. ``shape`` needs torch and is imported on first use so that
working with presets alone stays light.
"""

from __future__ import annotations

from .core.presets import Preset, PresetError
from .core.version import VERSION as __version__

__all__ = ["Preset", "PresetError", "shape", "__version__"]


def shape(logits, preset, history=(), generated=()):
    """The exact distribution ``preset`` samples from, given 1-D raw logits.

    See :func:`samplewright.core.sampling.chain.shape` for the arguments.
    """
    from .core.sampling.chain import shape as _shape

    return _shape(logits, preset, history, generated)
