"""Short phrases for frequency ranges and boosts, shared by the analyses, the commands and the
report so that a figure reads the same everywhere."""

from __future__ import annotations

__all__ = ["boost_text", "range_text"]

#: Below this a combined boost is shown as none (dB): the display resolution.
_NO_BOOST_DB = 0.05


def boost_text(max_boost_db):
    """``"max boost +2.1 dB"``, or ``"no boost (cuts only)"`` when the combined curve never
    rises above 0 dB (no "-0.0 dB boost")."""
    if max_boost_db < _NO_BOOST_DB:
        return "no boost (cuts only)"
    return f"max boost {max_boost_db:+.1f} dB"


def range_text(low, high, unit="Hz", fmt=".0f"):
    """``"48-181 Hz"``, or ``"70 Hz"`` when both ends print alike (no "70-70 Hz")."""
    a, b = format(low, fmt), format(high, fmt)
    return f"{a} {unit}" if a == b else f"{a}-{b} {unit}"
