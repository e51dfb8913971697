"""Per-step cost of BicycleEKF beside filterpy's ExtendedKalmanFilter, measured in one run.

Both filters get the same simulated inputs and measurements (predict at 100 Hz, pose
at 10 Hz), interleaved in one loop so machine noise hits both alike.
filterpy is given the same exact-arc prediction and Jacobians; its cost includes building
F, Q and H with numpy, as a user of it would have to. Prints microseconds per call and
the ratio filterpy / ours: the median of the per-call times of each round (robust to the
scheduler pre-empting single calls on a shared machine), then the median over rounds.

Run: .venv/bin/python bench/ekf_step.py [--steps N] [--rounds R]
"""

from __future__ import annotations

import argparse
import math
import statistics
import time

import numpy as np
from filterpy.kalman import ExtendedKalmanFilter

from kinematic_monitor.core import model as m
from kinematic_monitor.core.ekf import BicycleEKF, FilterNoise

PARAMS = m.VehicleParams(wheelbase=2.7, cg_to_rear_axle=1.35, wheel_radius=0.31, track_width=1.55)
NOISE = FilterNoise()
POSE_R = np.diag([0.05**2, 0.05**2, 0.01**2])


class Reference(ExtendedKalmanFilter):
    """filterpy EKF with the exact-arc prediction; u = (dt, delta, speed)."""

    def predict_x(self, u=0):
        dt, delta, speed = u
        xs = self.x
        d = delta + PARAMS.steering_offset + xs[4]
        xs[0], xs[1], xs[2] = m.step(xs[0], xs[1], xs[2], speed, d, dt, PARAMS)
        xs[3] = speed


def fq(xs: np.ndarray, dt: float, delta: float, speed: float) -> tuple[np.ndarray, np.ndarray]:
    """F and Q for the reference filter (same model as BicycleEKF)."""
    d = delta + PARAMS.steering_offset + xs[4]
    J = m.step_jacobian(xs[0], xs[1], xs[2], speed, d, dt, PARAMS)
    F = np.eye(5)
    F[:3, :3] = J[:, :3]
    F[:3, 4] = J[:, 4]
    F[3, 3] = 0.0
    G = np.zeros((5, 2))
    G[:3, 0] = J[:, 3]
    G[:3, 1] = J[:, 4]
    G[3, 0] = 1.0
    Q = G @ np.diag([NOISE.speed_std**2, NOISE.steer_std**2]) @ G.T
    n = NOISE
    Q += np.diag([n.pos_rw * dt, n.pos_rw * dt, n.yaw_rw * dt, 0.0, n.bias_rw * dt])
    return F, Q


H_POSE = np.hstack([np.eye(3), np.zeros((3, 2))])


def h_pose(xs: np.ndarray) -> np.ndarray:
    return xs[:3]


def pose_residual(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    r = a - b
    r[2] = math.remainder(r[2], 2 * math.pi)
    return r


def run_round(steps: int, seed: int) -> dict[str, tuple[float, float]]:
    rng = np.random.default_rng(seed)
    ours = BicycleEKF(PARAMS, NOISE)
    ours.initialise(0.0, 0.0, 0.0, 0.0, v=8.0)
    ref = Reference(dim_x=5, dim_z=3)
    ref.x = ours.state
    ref.P = ours.covariance
    ops = ("predict", "pose update")
    tot: dict[str, tuple[list[int], list[int]]] = {k: ([], []) for k in ops}  # ns per call
    pc = time.perf_counter_ns
    dt = 0.01
    for k in range(1, steps + 1):
        t = k * dt
        delta = 0.15 * math.sin(0.4 * t) + float(rng.normal(0, 0.003))
        speed = 8.0 + float(rng.normal(0, 0.05))
        a = pc()
        ours.predict(t, delta, speed)
        b = pc()
        F, Q = fq(ref.x, dt, delta, speed)
        ref.F, ref.Q = F, Q
        ref.predict(u=(dt, delta, speed))
        c = pc()
        row = tot["predict"]
        row[0].append(b - a)
        row[1].append(c - b)
        if k % 10 == 0:
            z = ours.state[:3] + rng.normal(0, 0.05, 3)
            zx, zy, zyaw = z.tolist()  # plain floats, as message fields arrive
            a = pc()
            ours.update_pose(zx, zy, zyaw, POSE_R)
            b = pc()
            ref.update(z, lambda _x: H_POSE, h_pose, R=POSE_R, residual=pose_residual)
            c = pc()
            row = tot["pose update"]
        else:
            continue
        row[0].append(b - a)
        row[1].append(c - b)
    diff = ours.state - ref.x
    diff[2] = math.remainder(diff[2], 2 * math.pi)
    assert np.max(np.abs(diff)) < 1e-6, f"filters disagree: {diff}"
    med = statistics.median
    return {k: (med(v[0]) / 1e3, med(v[1]) / 1e3) for k, v in tot.items()}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--steps", type=int, default=4000, help="predictions per round")
    ap.add_argument("--rounds", type=int, default=5)
    args = ap.parse_args()
    run_round(200, 0)  # warm-up
    rounds = [run_round(args.steps, seed) for seed in range(1, args.rounds + 1)]
    print(f"BicycleEKF vs filterpy ExtendedKalmanFilter, {args.rounds} rounds x {args.steps}")
    print(f"{'operation':<18}{'ours us':>10}{'filterpy us':>14}{'ratio':>8}")
    for op in rounds[0]:
        ours = statistics.median(r[op][0] for r in rounds)
        ref = statistics.median(r[op][1] for r in rounds)
        print(f"{op:<18}{ours:>10.1f}{ref:>14.1f}{ref / ours:>8.2f}")


if __name__ == "__main__":
    main()
