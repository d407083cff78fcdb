"""ruckig (L. Berscheid and T. Kroeger, "Jerk-limited Real-time Trajectory Generation with Arbitrary Target
States", Robotics: Science and Systems, 2021) as the outside reference for time-optimal jerk-limited motion.

Feature used: the velocity control interface (`ControlInterface.Velocity`: reach a target velocity and
acceleration from any current state under acceleration and jerk limits) with asymmetric acceleration limits
(`max_acceleration` / `min_acceleration`), and, for two axes, `Synchronization.Phase` / `Synchronization.Time`.
"""

from __future__ import annotations

from ruckig import ControlInterface, InputParameter, Result, Ruckig, Synchronization, Trajectory


def ruckig_velocity(
    starts: list[tuple[float, float]],
    targets: list[float],
    max_accel: list[float],
    min_accel: list[float],
    jerk: list[float],
    synchronization: Synchronization = Synchronization.No,
) -> Trajectory:
    dofs = len(starts)
    inp = InputParameter(dofs)
    inp.control_interface = ControlInterface.Velocity
    inp.synchronization = synchronization
    inp.current_position = [0.0] * dofs
    inp.current_velocity = [v for v, _ in starts]
    inp.current_acceleration = [a for _, a in starts]
    inp.target_velocity = list(targets)
    inp.target_acceleration = [0.0] * dofs
    inp.max_velocity = [1e3] * dofs
    inp.max_acceleration = list(max_accel)
    inp.min_acceleration = list(min_accel)
    inp.max_jerk = list(jerk)
    trajectory = Trajectory(dofs)
    result = Ruckig(dofs).calculate(inp, trajectory)
    assert result in (Result.Working, Result.Finished), result
    return trajectory
