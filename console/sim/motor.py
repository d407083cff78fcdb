"""An armature-controlled DC motor driving a wheel, open loop: a duty fraction in, the wheel rate out.

Seen at the wheel (every constant reflected through the gearbox), with the armature inductance neglected (its time
constant is far below the mechanical one for small gearmotors):

    J dw/dt = Kt i - b w - Tc sign(w),   i = (duty V - Ke w) / R

(the DC motor of any control textbook, e.g. G. Franklin, J. D. Powell, A. Emami-Naeini, Feedback Control of
Dynamic Systems, from memory; Coulomb friction Tc added, common practice). In SI units Ke = Kt. Between sign changes
of w this is linear, dw/dt = (w_end - w) / tau with tau = J R / (b R + Kt^2), so each step is solved in closed form:
exponentially towards w_end, stopping at zero when the drive cannot break static friction (|Kt duty V / R| <= Tc).
Pure numbers, no I/O; the dead time of the drive electronics is the caller's delay line.
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class DcMotor:
    """Wheel-side constants of one motor and gearbox."""

    resistance_ohm: float
    torque_constant_nm_per_a: float  # = back-EMF constant in V s / rad (SI)
    inertia_kgm2: float
    viscous_nms: float
    coulomb_nm: float
    supply_v: float

    @property
    def time_constant_s(self) -> float:
        kt = self.torque_constant_nm_per_a
        return self.inertia_kgm2 * self.resistance_ohm / (self.viscous_nms * self.resistance_ohm + kt * kt)

    def drive_torque_nm(self, duty: float, rate_radps: float) -> float:
        """Motor torque at the wheel for a duty (-1..1) and wheel rate: Kt (duty V - Ke w) / R."""
        kt = self.torque_constant_nm_per_a
        return kt * (duty * self.supply_v - kt * rate_radps) / self.resistance_ohm

    def step(self, rate_radps: float, duty: float, dt_s: float) -> tuple[float, float]:
        """(rate after dt, angle travelled in dt) for a duty held over dt, exact for this model."""
        angle = 0.0
        rate, left = rate_radps, dt_s
        stall_torque = self.drive_torque_nm(duty, 0.0)
        tau = self.time_constant_s
        damping = self.inertia_kgm2 / tau  # b + Kt^2 / R, in N m s
        while left > 0.0:
            if rate == 0.0:
                if abs(stall_torque) <= self.coulomb_nm:
                    return 0.0, angle  # static friction holds the wheel
                direction = math.copysign(1.0, stall_torque)
            else:
                direction = math.copysign(1.0, rate)
            # while the sign of w holds: dw/dt = (end - w) / tau
            end = (stall_torque - direction * self.coulomb_nm) / damping
            if rate != 0.0 and end * direction < 0.0:
                # heading through zero: the time to reach it, then decide again there
                to_zero = tau * math.log((rate - end) / (0.0 - end))
                if to_zero < left:
                    angle += end * to_zero + (rate - end) * tau * (1.0 - math.exp(-to_zero / tau))
                    rate, left = 0.0, left - to_zero
                    continue
            decay = math.exp(-left / tau)
            angle += end * left + (rate - end) * tau * (1.0 - decay)
            return end + (rate - end) * decay, angle
        return rate, angle
