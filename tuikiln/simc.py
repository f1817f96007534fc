"""PID settings by the SIMC rules (Skogestad 2003) from a first- or second-order plus dead
time model.

S. Skogestad, "Simple analytic rules for model reduction and PID controller tuning",
Journal of Process Control 13 (2003) 291-309, eq. for the SIMC settings:

    Kc    = tau1 / (k * (tau_c + theta))
    tau_I = min(tau1, 4 * (tau_c + theta))
    tau_D = tau2                       (second-order model; 0 for a first-order one)

with the closed-loop time constant tau_c = theta for "tight" control, the paper's
recommended default. The settings are for the series (cascade) PID form; for a PI
controller (tau_D = 0) the series and the ideal (parallel) forms are the same.

A controller that samples every dt seconds adds about dt/2 to the effective dead time
(the paper's remark on digital control, from memory); `sample_s` applies it, and it is
what keeps a delay too short to measure from asking for an unbounded gain.
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class PidSettings:
    kp: float
    """Proportional gain: output units per unit of error (here % per °C)."""
    ti_s: float
    td_s: float
    tau_c_s: float


def simc_pid(k: float, tau1_s: float, theta_s: float, *, tau2_s: float = 0.0,
             tau_c_s: float | None = None, sample_s: float = 0.0) -> PidSettings:
    """SIMC settings for k*exp(-theta*s)/((tau1*s + 1)(tau2*s + 1)); ValueError for a model
    that has none (k or tau1 not above zero, theta + tau_c zero)."""
    theta = theta_s + 0.5 * sample_s
    tau_c = theta if tau_c_s is None else tau_c_s
    if not (k > 0 and tau1_s > 0 and math.isfinite(k) and math.isfinite(tau1_s)):
        raise ValueError("the model needs a gain and a time constant above zero")
    if not tau_c + theta > 0:
        raise ValueError("the model needs a dead time (or a closed-loop time) above zero")
    kc = tau1_s / (k * (tau_c + theta))
    ti = min(tau1_s, 4.0 * (tau_c + theta))
    return PidSettings(kc, ti, max(0.0, tau2_s), tau_c)
