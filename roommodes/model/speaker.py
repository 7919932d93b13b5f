"""A loudspeaker's own low-frequency response, applied on top of the room transfer.

Two descriptions are supported:

* a high-pass alignment from ``lowcut_hz`` (the -3 dB point) and ``lowcut_order``:
  order 2 is a sealed box modelled as a second-order Butterworth high-pass (Q = 0.707,
  a common sealed-box alignment); order 4 is a vented box modelled as a fourth-order
  Butterworth high-pass (the B4 alignment of Thiele, "Loudspeakers in vented boxes",
  J. Audio Eng. Soc. 19(5):382, 1971), whose -3 dB point equals the box tuning;
* an imported anechoic curve ``(freq_hz, level_db)``, interpolated in log frequency and
  held flat beyond its ends. Only its magnitude is used: it scales the level and leaves
  the phase of the room transfer alone (no minimum-phase reconstruction).
"""

from __future__ import annotations

import numpy as np

__all__ = ["speaker_response", "highpass_response"]


def highpass_response(freq_hz, lowcut_hz, order):
    """Complex response of a Butterworth high-pass with -3 dB at ``lowcut_hz``.

    Parameters
    ----------
    freq_hz : array_like
        Frequencies, Hz.
    lowcut_hz : float
        -3 dB frequency, Hz (> 0).
    order : int
        2 (sealed) or 4 (vented).

    Returns
    -------
    ndarray, complex
    """
    if order not in (2, 4):
        raise ValueError(f"lowcut_order must be 2 (sealed) or 4 (vented), got {order}")
    s = 1j * np.asarray(freq_hz, dtype=float) / float(lowcut_hz)  # normalised Laplace variable
    # Butterworth high-pass: s^n / B_n(s), with B_n the normalised Butterworth polynomial
    # (pole pairs with damping 2 sin((2k - 1) pi / (2n)): sqrt(2) for n = 2; 0.7654 and
    # 1.8478 for n = 4)
    den = np.ones_like(s)
    for k in range(1, order // 2 + 1):
        den = den * (s**2 + 2 * np.sin((2 * k - 1) * np.pi / (2 * order)) * s + 1)
    return s**order / den


def speaker_response(speaker, freq_hz):
    """The speaker's own response at ``freq_hz`` (complex, 1 where it has none)."""
    f = np.asarray(freq_hz, dtype=float)
    if speaker.response is not None:
        fr, lv = (np.asarray(v, dtype=float) for v in speaker.response)
        level = np.interp(np.log(f), np.log(fr), lv)
        return 10 ** (level / 20) + 0j
    if speaker.lowcut_hz:
        return highpass_response(f, speaker.lowcut_hz, speaker.lowcut_order)
    return np.ones(f.shape, dtype=complex)
