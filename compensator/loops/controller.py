"""The firmware's discrete PID as the loop analysis sees it: gains, transfer functions, a state-space realisation.

The controller is the discrete PID of the firmware reference
(:mod:`compensator.firmware.pid`): parallel form, forward-Euler integrator
(the integral used at sample k holds the errors up to k-1), derivative on
the measurement through a first-order filter (``Tf = kd / (kp N)``, backward
difference), setpoint weight ``b`` on the proportional term. With
``q = z^-1``, and away from the output limits::

    C(z)  = kp + ki T q / (1 - q) + kd (1 - q) / (T + Tf (1 - q))    (measurement to actuator)
    Cr(z) = b kp + ki T q / (1 - q)                                  (setpoint to actuator)
"""

from __future__ import annotations

from dataclasses import dataclass

import control
import numpy as np

__all__ = ["PidGains", "controller_frequency_response", "controller_tf"]


@dataclass(frozen=True)
class PidGains:
    """PID gains in parallel form: ``u = kp e + ki integral(e) + kd de/dt``.

    Attributes
    ----------
    kp : float
        Proportional gain, actuator units per output unit.
    ki_per_s : float
        Integral gain, actuator units per output unit per second.
    kd_s : float
        Derivative gain, actuator units per output unit times second.
    derivative_filter_n : float
        N: the derivative filter time constant is ``kd / (kp N)`` (one sample when kp is 0).
    setpoint_weight : float
        b: the proportional term acts on ``b r - y``.
    """

    kp: float
    ki_per_s: float
    kd_s: float = 0.0
    derivative_filter_n: float = 10.0
    setpoint_weight: float = 1.0

    @property
    def derivative_filter_s(self) -> float:
        """Derivative filter time constant Tf = Td / N, second (0 without derivative)."""
        if self.kd_s == 0 or self.kp == 0:
            return 0.0
        return abs(self.kd_s / self.kp) / self.derivative_filter_n



def _controller_parts(gains: PidGains, T: float):
    """Numerator and denominator of C(z) and Cr(z) in powers of z^-1 (lowest first)."""
    kp, ki, kd = gains.kp, gains.ki_per_s, gains.kd_s
    tf_ = gains.derivative_filter_s if kp != 0 else T
    one_minus_q = np.array([1.0, -1.0])
    b = gains.setpoint_weight
    i_num = np.array([0.0, ki * T])  # ki T q over (1 - q)
    if kd != 0:
        dden = np.array([T + tf_, -tf_])
        den = np.convolve(one_minus_q, dden)
        integral = np.convolve(i_num, dden)[:3]
        num = kp * den + integral + kd * np.convolve(one_minus_q, one_minus_q)
        rnum = b * kp * den + integral
    else:
        den = one_minus_q
        num = kp * den + i_num
        rnum = b * kp * den + i_num
    return num, den, rnum


def _q_to_tf(num_q, den_q, T):
    """Polynomials in z^-1 (lowest power first) -> python-control transfer function in z."""
    n = max(len(num_q), len(den_q))
    num = np.pad(np.asarray(num_q, float), (0, n - len(num_q)))
    den = np.pad(np.asarray(den_q, float), (0, n - len(den_q)))
    return control.tf(num, den, T)


def controller_tf(gains: PidGains, sample_time_s: float, setpoint_path: bool = False) -> control.TransferFunction:
    """The discrete PID as a transfer function (see the module docstring).

    Parameters
    ----------
    gains : PidGains
    sample_time_s : float
        Firmware period, second.
    setpoint_path : bool
        Return ``Cr`` (setpoint to actuator) instead of ``C`` (measurement to actuator).

    Returns
    -------
    control.TransferFunction
        Discrete, ``dt = sample_time_s``.
    """
    num, den, rnum = _controller_parts(gains, sample_time_s)
    return _q_to_tf(rnum if setpoint_path else num, den, sample_time_s)


def controller_frequency_response(gains: PidGains, sample_time_s: float, omega_rad_s):
    """``C(exp(j omega T))`` for one or many controllers.

    Parameters
    ----------
    gains : PidGains
        Fields may be arrays of one shape (many controllers at once).
    sample_time_s : float
        Firmware period, second.
    omega_rad_s : array_like
        Angular frequencies, rad/s (last axis of the result).

    Returns
    -------
    ndarray of complex
        Shape ``gains.kp.shape + omega.shape``.
    """
    T = sample_time_s
    q = np.exp(-1j * np.asarray(omega_rad_s, dtype=float) * T)
    kp = np.asarray(gains.kp, dtype=float)
    ki = np.asarray(gains.ki_per_s, dtype=float)
    kd = np.asarray(gains.kd_s, dtype=float)
    c = kp[..., None] + (ki[..., None] * T) * q / (1.0 - q)
    if np.any(kd != 0):
        with np.errstate(divide="ignore", invalid="ignore"):
            tf_ = np.where(kp == 0, T, np.abs(kd / np.where(kp == 0, 1.0, kp)) / gains.derivative_filter_n)
            tf_ = np.where(kd != 0, tf_, 0.0)
        c = c + kd[..., None] * (1.0 - q) / (T + tf_[..., None] * (1.0 - q))
    return c


def _controller_realisation(gains: PidGains, T: float):
    """One observable-canonical realisation of ``u = Cr r - C y`` (shared states, two inputs)."""
    num, den, rnum = _controller_parts(gains, T)
    m = len(den) - 1
    d0 = den[0]
    a = np.asarray(den, float) / d0
    br = np.pad(np.asarray(rnum, float), (0, m + 1 - len(rnum))) / d0
    by = -np.pad(np.asarray(num, float), (0, m + 1 - len(num))) / d0
    ak = np.zeros((m, m))
    ak[:, 0] = -a[1:]
    ak[: m - 1, 1:] = np.eye(m - 1)
    bkr = (br[1:] - a[1:] * br[0]).reshape(m, 1)
    bky = (by[1:] - a[1:] * by[0]).reshape(m, 1)
    ck = np.zeros((1, m))
    ck[0, 0] = 1.0
    return ak, bkr, bky, ck, float(br[0]), float(by[0])
