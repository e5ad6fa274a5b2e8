"""Safety figures of a charged capacitor: stored energy and discharge time
(refs §7).
"""

import numpy as np

from .validation import _check, _out


# --- 6. safety -------------------------------------------------------------

def stored_energy_j(capacitance_f, voltage_v):
    """Energy stored in a charged capacitor, ``C V**2 / 2``.

    Parameters
    ----------
    capacitance_f : float or array-like
        Capacitance [F], > 0.
    voltage_v : float or array-like
        Voltage [V].

    Returns
    -------
    float or ndarray
        Energy [J].

    References
    ----------
    refs §7 (computed from the formula).

    Examples
    --------
    >>> round(stored_energy_j(100e-6, 400.0), 6)
    8.0
    """
    c = _check("capacitance_f", capacitance_f, "positive")
    v = _check("voltage_v", voltage_v)
    return _out(0.5 * c * v**2)


def discharge_time_s(capacitance_f, resistance_ohm, v0_v, v_safe_v):
    """Time for a capacitor to discharge through a resistor to a safe voltage.

    Parameters
    ----------
    capacitance_f : float or array-like
        Capacitance [F], > 0.
    resistance_ohm : float or array-like
        Discharge resistance [ohm], > 0.
    v0_v : float or array-like
        Initial voltage magnitude [V], >= 0.
    v_safe_v : float or array-like
        Target voltage [V], > 0 (60 V d.c. is ``parameters.SAFE_VOLTAGE_V``).

    Returns
    -------
    float or ndarray
        Time [s]; 0 when ``v0_v <= v_safe_v``.

    Notes
    -----
    .. math:: t = R C \\ln(V_0 / V_{safe})

    References
    ----------
    refs §7 (computed from the formula).

    Examples
    --------
    >>> round(discharge_time_s(100e-6, 10e3, 400.0, 60.0), 3)
    1.897
    """
    c = _check("capacitance_f", capacitance_f, "positive")
    r = _check("resistance_ohm", resistance_ohm, "positive")
    v0 = _check("v0_v", v0_v, "nonnegative")
    vs = _check("v_safe_v", v_safe_v, "positive")
    with np.errstate(divide="ignore"):
        return _out(r * c * np.log(np.maximum(v0, vs) / vs))
