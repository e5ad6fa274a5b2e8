"""Whether a part's figures could belong to a real aluminium electrolytic
capacitor: the charge its can holds, its ESR against its capacitance, and the
heat its ripple current would make.

These catch figures that are wrong by orders of magnitude (1 pF typed for
1 uF, an ESR in milliohms typed as ohms), not parts that are merely poor; the
bounds are wide on purpose and each says where it comes from.
"""

import numpy as np

from scheduling import parameters as P

from .life import ripple_rise_k
from .validation import _check, _out

#: The range of C V per can volume taken as real [uC/cm^3] (see scheduling.parameters).
CHARGE_DENSITY_RANGE_UC_PER_CM3 = (P.CHARGE_DENSITY_MIN_UC_PER_CM3, P.CHARGE_DENSITY_MAX_UC_PER_CM3)


def can_volume_cm3(diameter_mm, length_mm):
    """Volume of a cylindrical can.

    Parameters
    ----------
    diameter_mm, length_mm : float or array-like
        Can diameter and length [mm], > 0.

    Returns
    -------
    float or ndarray
        Volume [cm^3].

    Notes
    -----
    .. math:: V = \\pi D^2 L / 4

    References
    ----------
    The volume of a right circular cylinder (any geometry handbook).

    Examples
    --------
    >>> round(can_volume_cm3(16, 31.5), 3)
    6.333
    """
    d = _check("diameter_mm", diameter_mm, "positive")
    length = _check("length_mm", length_mm, "positive")
    return _out(np.pi * d**2 * length / 4.0 / 1000.0)


def charge_density_uc_per_cm3(capacitance_f, rated_voltage_v, diameter_mm, length_mm):
    """Rated charge (capacitance times rated voltage) per volume of can.

    Parameters
    ----------
    capacitance_f : float or array-like
        Capacitance [F], > 0.
    rated_voltage_v : float or array-like
        Rated voltage [V], > 0.
    diameter_mm, length_mm : float or array-like
        Can size [mm], > 0.

    Returns
    -------
    float or ndarray
        C V / volume [uC/cm^3] (microfarad-volts per cubic centimetre).

    Notes
    -----
    The anode foil's area and its oxide thickness (proportional to the
    forming voltage) set C V per volume for a given foil technology, so the
    figure varies far less between parts of one can size than C alone.
    Series data sheets list, for example, 2200 uF 35 V in 16 x 31.5 mm
    (about 12,160 uC/cm^3) and 10 uF 16 V in 5 x 11 mm (about 740 uC/cm^3)
    (from memory).

    Examples
    --------
    >>> round(charge_density_uc_per_cm3(2200e-6, 35, 16, 31.5), -1)
    12160.0
    """
    c = _check("capacitance_f", capacitance_f, "positive")
    v = _check("rated_voltage_v", rated_voltage_v, "positive")
    return _out(c * 1e6 * v / can_volume_cm3(diameter_mm, length_mm))


def tan_delta_from_esr(esr_ohm, capacitance_f, freq_hz=P.TAN_DELTA_FREQ_HZ):
    """Dissipation factor from an ESR: the inverse of ``esr_from_tan_delta_ohm``.

    Parameters
    ----------
    esr_ohm : float or array-like
        ESR [ohm], >= 0.
    capacitance_f : float or array-like
        Capacitance [F], > 0.
    freq_hz : float or array-like, default 120
        Frequency [Hz], > 0.

    Returns
    -------
    float or ndarray
        tan delta [-].

    Notes
    -----
    .. math:: \\tan\\delta = 2 \\pi f C \\, ESR

    References
    ----------
    refs §4: ``ESR = tan_delta / (2*pi*f*C)``; check: tan delta 0.10,
    1000 uF, 120 Hz -> 0.1326 ohm.

    Examples
    --------
    >>> round(tan_delta_from_esr(0.1326, 1000e-6), 3)
    0.1
    """
    e = _check("esr_ohm", esr_ohm, "nonnegative")
    c = _check("capacitance_f", capacitance_f, "positive")
    f = _check("freq_hz", freq_hz, "positive")
    return _out(2.0 * np.pi * f * c * e)


def implausible_parts(capacitance_f, rated_voltage_v, esr_ohm, diameter_mm, length_mm, ripple_current_a=0.0):
    """Which parts' figures no real aluminium electrolytic capacitor has.

    Parameters
    ----------
    capacitance_f : array-like
        Capacitance [F], > 0.
    rated_voltage_v : array-like
        Rated voltage [V], > 0.
    esr_ohm : array-like
        ESR at 120 Hz (or stated instead of tan delta) [ohm], > 0.
    diameter_mm, length_mm : array-like
        Can size [mm], > 0.
    ripple_current_a : array-like, default 0
        RMS ripple current in the circuit [A], >= 0.

    Returns
    -------
    dict of ndarray of bool
        ``charge``: C V per can volume outside
        [``CHARGE_DENSITY_MIN_UC_PER_CM3``, ``CHARGE_DENSITY_MAX_UC_PER_CM3``];
        ``esr``: the ESR's tan delta at 120 Hz outside
        [``TAN_DELTA_PLAUSIBLE_MIN``, ``TAN_DELTA_PLAUSIBLE_MAX``];
        ``ripple``: ripple heating above ``RIPPLE_RISE_PLAUSIBLE_MAX_K``.
        Each also has its figure: ``charge_uc_per_cm3``, ``tan_delta``,
        ``ripple_rise_k``.

    Examples
    --------
    >>> bad = implausible_parts([1e-12, 2200e-6], [16, 35], [3.5, 0.05], [5, 16], [11, 31.5], [0.04, 1.2])
    >>> bad["charge"].tolist(), bad["esr"].tolist(), bad["ripple"].tolist()
    ([True, False], [True, False], [False, False])
    """
    charge = np.atleast_1d(charge_density_uc_per_cm3(capacitance_f, rated_voltage_v, diameter_mm, length_mm))
    tan = np.atleast_1d(tan_delta_from_esr(esr_ohm, capacitance_f))
    with np.errstate(over="ignore", invalid="ignore"):
        rise = np.atleast_1d(ripple_rise_k(ripple_current_a, esr_ohm, diameter_mm, length_mm))
    return {
        "charge": (charge < P.CHARGE_DENSITY_MIN_UC_PER_CM3) | (charge > P.CHARGE_DENSITY_MAX_UC_PER_CM3),
        "esr": (tan < P.TAN_DELTA_PLAUSIBLE_MIN) | (tan > P.TAN_DELTA_PLAUSIBLE_MAX),
        "ripple": ~(rise <= P.RIPPLE_RISE_PLAUSIBLE_MAX_K),
        "charge_uc_per_cm3": charge, "tan_delta": tan, "ripple_rise_k": rise,
    }


__all__ = ["CHARGE_DENSITY_RANGE_UC_PER_CM3", "can_volume_cm3", "charge_density_uc_per_cm3", "tan_delta_from_esr", "implausible_parts"]
