"""Dynamic single-track vehicle with four spinning wheels (REP 103 frames, SI units).

Model (all in the body frame at the centre of gravity, x forward, y left):

* chassis: planar rigid body, states X, Y (map), yaw, v_x, v_y, yaw rate r;
* tyres: Magic Formula with combined slip (``tyre.py``); each axle's two wheels share the
  axle slip angle, while longitudinal slip and force are per wheel; front wheels point
  along their own Ackermann angles;
* wheels: I_w dOmega/dt = T_drive - T_brake - R_e F_x, drive torque split by the drivetrain
  (FWD/RWD/AWD, open differentials: equal torque left/right), brake torque split front/rear;
* tyre relaxation (Pacejka 2012, transient slip): the slip ratio is a first-order state
  dkappa/dt = (V_sx - |V_x| kappa) / sigma with V_sx = Omega R_e - V_x and relaxation length
  sigma. This removes the stiffness of wheel-spin dynamics at low speed (the wheel/tyre
  system becomes an oscillator of ~25 Hz instead of a time constant of a fraction of a ms),
  so fixed-step RK4 at 2 ms stays stable; a small slip damping at very low speed (common
  practice, no source) keeps a standing car quiet;
* brakes: Coulomb friction regularised as a saturated linear law
  T_b = clip(k_lock Omega, -T_max, T_max) with k_lock = I_w / tau_lock (common practice, no
  source), so a wheel can lock (Omega ~ 0) and a parked car holds still without chattering;
* load transfer: longitudinal and lateral, quasi-static from first-order filtered body
  accelerations (tau = 0.1 s, a stand-in for pitch/roll dynamics);
* low speed: below ``blend_speeds`` the lateral dynamics blend into the kinematic bicycle
  model (Rajamani 2012), because tyre slip models are singular at standstill (Kong et al.,
  IEEE IV 2015); the blend is linear in v_x between the two speeds;
* resistance: aerodynamic drag 0.5 rho CdA v|v| and rolling resistance c_rr m g (smoothed
  through zero speed).

Steering is a rate-limited actuator on the bicycle-equivalent road-wheel angle; left and
right road-wheel angles follow Ackermann geometry (cot d_l = cot d - t/2L,
cot d_r = cot d + t/2L, so cot d = (cot d_l + cot d_r)/2).

Integration: classical RK4 with a fixed step ``dt`` <= 2 ms; inputs (steering angle, torques,
road friction) are held over a step. The derivative is written on plain floats with the
``math`` module for speed.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

from kinematic_monitor.sim.tyre import TyreCoefficients, TyreOnRoad

GRAVITY = 9.81  # [m/s^2]
AIR_DENSITY = 1.2  # [kg/m^3]

DRIVETRAINS = ("FWD", "RWD", "AWD")

# state vector layout
IX, IY, IYAW, IVX, IVY, IR = 0, 1, 2, 3, 4, 5
IOMEGA = 6  # 6..9: wheel speeds FL, FR, RL, RR [rad/s]
IKAPPA = 10  # 10..13: transient slip ratios FL, FR, RL, RR [-]
IAXF, IAYF = 14, 15  # filtered body accelerations for load transfer [m/s^2]
NSTATE = 16

KAPPA_LIMIT = 2.0  # [-] bound of the transient slip state (|kappa| of a spinning wheel)


@dataclass(frozen=True)
class SimVehicle:
    """Parameters of the simulated test vehicle (invented numbers, a mid-size saloon).

    Lengths [m], masses [kg], inertias [kg m^2], angles [rad], torques [N m] at the wheels
    (totals over all wheels), power [W].
    """

    mass: float = 1520.0
    yaw_inertia: float = 2450.0
    wheelbase: float = 2.70
    cg_to_rear_axle: float = 1.40
    cg_height: float = 0.52
    track_width: float = 1.55
    wheel_radius: float = 0.31
    wheel_inertia: float = 1.0
    tyre_front: TyreCoefficients = field(default_factory=lambda: TyreCoefficients(c_alpha=8.5))
    tyre_rear: TyreCoefficients = field(default_factory=lambda: TyreCoefficients(c_alpha=12.0))
    relaxation_length: float = 0.3
    max_steer: float = 0.60
    max_steer_rate: float = 1.0
    max_drive_torque: float = 3200.0
    max_drive_power: float = 100e3
    max_brake_torque: float = 9000.0
    brake_front_share: float = 0.65
    drivetrain: str = "FWD"
    drag_area: float = 0.68
    rolling_resistance: float = 0.012
    blend_speeds: tuple[float, float] = (1.0, 3.0)
    brake_lock_time: float = 0.004

    def __post_init__(self) -> None:
        positive = (
            "mass",
            "yaw_inertia",
            "wheelbase",
            "cg_to_rear_axle",
            "cg_height",
            "track_width",
            "wheel_radius",
            "wheel_inertia",
            "relaxation_length",
            "max_steer",
            "max_steer_rate",
            "max_drive_torque",
            "max_drive_power",
            "max_brake_torque",
            "brake_lock_time",
        )
        for name in positive:
            v = getattr(self, name)
            if not (isinstance(v, int | float) and math.isfinite(v) and v > 0.0):
                raise ValueError(f"SimVehicle.{name}={v!r} must be a positive finite number")
        if not self.cg_to_rear_axle < self.wheelbase:
            raise ValueError(
                f"SimVehicle.cg_to_rear_axle={self.cg_to_rear_axle!r} must be < "
                f"wheelbase={self.wheelbase!r}"
            )
        if not 0.0 <= self.brake_front_share <= 1.0:
            raise ValueError(
                f"SimVehicle.brake_front_share={self.brake_front_share!r} must be in [0, 1]"
            )
        if self.drivetrain not in DRIVETRAINS:
            raise ValueError(
                f"SimVehicle.drivetrain={self.drivetrain!r} must be one of {DRIVETRAINS}"
            )
        for name in ("drag_area", "rolling_resistance"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v >= 0.0):
                raise ValueError(f"SimVehicle.{name}={v!r} must be >= 0")
        v1, v2 = self.blend_speeds
        if not (0.0 < v1 < v2):
            raise ValueError(f"SimVehicle.blend_speeds={self.blend_speeds!r} needs 0 < v1 < v2")

    @property
    def cg_to_front_axle(self) -> float:
        """l_f [m]."""
        return self.wheelbase - self.cg_to_rear_axle

    def drive_split(self) -> tuple[float, float, float, float]:
        """Share of the total drive torque per wheel FL, FR, RL, RR [-]."""
        if self.drivetrain == "FWD":
            return (0.5, 0.5, 0.0, 0.0)
        if self.drivetrain == "RWD":
            return (0.0, 0.0, 0.5, 0.5)
        return (0.25, 0.25, 0.25, 0.25)

    def brake_split(self) -> tuple[float, float, float, float]:
        """Share of the total brake torque per wheel FL, FR, RL, RR [-]."""
        f = 0.5 * self.brake_front_share
        r = 0.5 * (1.0 - self.brake_front_share)
        return (f, f, r, r)

    def understeer_gradient(self, mu: float = 1.0) -> float:
        """Linear understeer gradient K = W_f/C_af - W_r/C_ar [rad per (m/s^2)].

        Gillespie 1992 (ch. 6, from memory) gives K in rad per g; with cornering stiffness
        per unit load c_alpha, W_f / C_af = 1 / c_alpha_f (independent of mu here because
        the tyre model keeps B*C*D fixed).
        """
        del mu
        per_g = 1.0 / self.tyre_front.c_alpha - 1.0 / self.tyre_rear.c_alpha
        return per_g / GRAVITY


def ackermann_angles(delta: float, wheelbase: float, track: float) -> tuple[float, float]:
    """Left and right road-wheel angles [rad] for a bicycle-equivalent angle ``delta`` [rad].

    Ackermann geometry: cot d_l = cot d - t/(2L), cot d_r = cot d + t/(2L) (left turn
    positive, REP 103), written with tangents so that delta = 0 is regular.
    """
    tan_d = math.tan(delta)
    q = 0.5 * track / wheelbase
    return math.atan(tan_d / (1.0 - q * tan_d)), math.atan(tan_d / (1.0 + q * tan_d))


FrictionFn = Callable[[float, float], float]


class VehicleDynamics:
    """Fixed-step RK4 integrator of the model described in the module docstring.

    Use :meth:`step` with the held inputs; read :attr:`state` (list of NSTATE floats),
    :attr:`delta` (bicycle road-wheel angle) and :attr:`last_accel` ((a_x, a_y) at the
    start of the last step).
    """

    def __init__(
        self,
        vehicle: SimVehicle,
        dt: float,
        friction: FrictionFn | float | None = None,
        x0: float = 0.0,
        y0: float = 0.0,
        yaw0: float = 0.0,
        v0: float = 0.0,
    ) -> None:
        if not (math.isfinite(dt) and 0.0 < dt <= 0.002):
            raise ValueError(f"integration step dt={dt!r} s must be in (0, 0.002]")
        if not (math.isfinite(v0) and v0 >= 0.0):
            raise ValueError(f"initial speed v0={v0!r} m/s must be finite and >= 0")
        self.p = vehicle
        self.dt = dt
        if friction is None:
            friction = 1.0
        self.friction: FrictionFn | None = None if isinstance(friction, int | float) else friction
        self.mu_const = float(friction) if isinstance(friction, int | float) else 1.0
        r = vehicle.wheel_radius
        self.state: list[float] = [x0, y0, yaw0, v0, 0.0, 0.0] + [v0 / r] * 4 + [0.0] * 6
        self.delta = 0.0
        self.delta_rate = 0.0
        self.last_accel = (0.0, 0.0)
        self.mu_wheels = (1.0, 1.0, 1.0, 1.0)
        self._tyre_cache: dict[tuple[int, float], TyreOnRoad] = {}
        self._drive_split = vehicle.drive_split()
        self._tuple_cache: dict[tuple[int, float], tuple[float, ...]] = {}
        p = vehicle
        lf = p.cg_to_front_axle
        self._consts = (
            p.mass,
            p.wheelbase,
            lf,
            p.cg_to_rear_axle,
            0.5 * p.track_width,
            p.wheel_radius,
            p.wheel_inertia,
            p.relaxation_length,
            p.mass * GRAVITY * lf / p.wheelbase,
            p.mass * GRAVITY * p.cg_to_rear_axle / p.wheelbase,
            p.mass * p.cg_height,
            p.track_width,
            p.blend_speeds[0],
            p.blend_speeds[1],
            0.5 * AIR_DENSITY * p.drag_area,
            p.rolling_resistance * p.mass * GRAVITY,
            p.yaw_inertia,
        )
        self._brake_split = vehicle.brake_split()

    # ------------------------------------------------------------------ helpers
    def _tyre_tuple(self, axle: int, mu: float) -> tuple[float, ...]:
        key = (axle, mu)
        tt = self._tuple_cache.get(key)
        if tt is None:
            t = self.tyre_on(axle, mu)
            tt = (
                t.mu,
                1.0 / t.kappa_peak,
                1.0 / t.alpha_peak,
                t.Bx * t.kappa_peak,
                t.Cx,
                t.Ex,
                t.By * t.alpha_peak,
                t.Cy,
                t.Ey,
            )
            self._tuple_cache[key] = tt
        return tt

    def tyre_on(self, axle: int, mu: float) -> TyreOnRoad:
        """Cached tyre constants for axle 0 (front) / 1 (rear) on road friction ``mu``."""
        key = (axle, mu)
        t = self._tyre_cache.get(key)
        if t is None:
            coef = self.p.tyre_front if axle == 0 else self.p.tyre_rear
            t = TyreOnRoad.make(coef, mu)
            self._tyre_cache[key] = t
        return t

    def wheel_positions(self) -> list[tuple[float, float]]:
        """Map-frame positions of the wheel contact points FL, FR, RL, RR [m]."""
        p = self.p
        s = self.state
        c, sn = math.cos(s[IYAW]), math.sin(s[IYAW])
        hw = 0.5 * p.track_width
        out = []
        for px, py in (
            (p.cg_to_front_axle, hw),
            (p.cg_to_front_axle, -hw),
            (-p.cg_to_rear_axle, hw),
            (-p.cg_to_rear_axle, -hw),
        ):
            out.append((s[IX] + c * px - sn * py, s[IY] + sn * px + c * py))
        return out

    # ------------------------------------------------------------------ stepping
    def step(self, delta_cmd: float, drive_torque: float, brake_torque: float) -> None:
        """Advance one step ``dt``.

        ``delta_cmd`` [rad] bicycle road-wheel angle request (clamped to +-max_steer, slewed
        at max_steer_rate); ``drive_torque`` [N m] total at the wheels (>= 0, limited by
        max torque and power); ``brake_torque`` [N m] total (>= 0, limited).
        """
        p = self.p
        dt = self.dt
        if not (
            math.isfinite(delta_cmd)
            and math.isfinite(drive_torque)
            and math.isfinite(brake_torque)
        ):
            raise ValueError(
                f"non-finite input: delta_cmd={delta_cmd!r}, drive_torque={drive_torque!r}, "
                f"brake_torque={brake_torque!r}"
            )
        # steering actuator: clamp, then rate limit
        cmd = min(max(delta_cmd, -p.max_steer), p.max_steer)
        max_d = p.max_steer_rate * dt
        d_delta = min(max(cmd - self.delta, -max_d), max_d)
        self.delta += d_delta
        self.delta_rate = d_delta / dt
        # torque limits (power limit on the mean driven-wheel speed)
        s = self.state
        split = self._drive_split
        w_drv = sum(abs(s[IOMEGA + i]) * split[i] for i in range(4)) / max(sum(split), 1e-9)
        t_drive = min(max(drive_torque, 0.0), p.max_drive_torque)
        if w_drv > 1.0:
            t_drive = min(t_drive, p.max_drive_power / w_drv)
        t_brake = min(max(brake_torque, 0.0), p.max_brake_torque)
        # road friction under each wheel
        if self.friction is None:
            mus: tuple[float, ...] = (self.mu_const,) * 4
        else:
            fr = self.friction
            mus = tuple(fr(wx, wy) for wx, wy in self.wheel_positions())
        for m in mus:
            if not (math.isfinite(m) and m > 0.0):
                raise ValueError(
                    f"road friction mu={m!r} under a wheel must be positive and finite"
                )
        self.mu_wheels = mus  # type: ignore[assignment]
        ctx = self._context(t_drive, t_brake, mus)
        f = _derivative
        x0 = s
        k1 = f(x0, ctx)
        x1 = [a + 0.5 * dt * b for a, b in zip(x0, k1, strict=True)]
        k2 = f(x1, ctx)
        x2 = [a + 0.5 * dt * b for a, b in zip(x0, k2, strict=True)]
        k3 = f(x2, ctx)
        x3 = [a + dt * b for a, b in zip(x0, k3, strict=True)]
        k4 = f(x3, ctx)
        h6 = dt / 6.0
        new = [
            a + h6 * (b1 + 2.0 * b2 + 2.0 * b3 + b4)
            for a, b1, b2, b3, b4 in zip(x0, k1, k2, k3, k4, strict=True)
        ]
        for i in range(IKAPPA, IKAPPA + 4):
            v = new[i]
            if v > KAPPA_LIMIT:
                new[i] = KAPPA_LIMIT
            elif v < -KAPPA_LIMIT:
                new[i] = -KAPPA_LIMIT
        # body-frame CG acceleration at the start of the step
        self.last_accel = (k1[IVX] - x0[IR] * x0[IVY], k1[IVY] + x0[IR] * x0[IVX])
        self.state = new

    def _context(
        self, t_drive: float, t_brake: float, mus: tuple[float, ...]
    ) -> tuple[object, ...]:
        p = self.p
        d = self.delta
        dl, dr = ackermann_angles(d, p.wheelbase, p.track_width)
        ds = self._drive_split
        bs = self._brake_split
        tyres = (
            self._tyre_tuple(0, mus[0]),
            self._tyre_tuple(0, mus[1]),
            self._tyre_tuple(1, mus[2]),
            self._tyre_tuple(1, mus[3]),
        )
        return (
            self._consts,
            d,
            math.tan(d),
            self.delta_rate / math.cos(d) ** 2,
            math.cos(dl),
            math.sin(dl),
            math.cos(dr),
            math.sin(dr),
            tuple(t_drive * ds[i] for i in range(4)),
            tuple(t_brake * bs[i] for i in range(4)),
            tyres,
            p.wheel_inertia / p.brake_lock_time,
        )

    def derivative(self) -> list[float]:
        """State derivative at the current state with zero torques (for inspection/tests)."""
        return _derivative(self.state, self._context(0.0, 0.0, self.mu_wheels))


TAU_LOAD = 0.1  # [s] load-transfer lag
TAU_KIN = 0.05  # [s] pull towards the kinematic constraint at low speed
SLIP_DAMP_SPEED = 2.0  # [m/s] below this wheel speed the slip damping fades in
SLIP_DAMPING = 0.15  # [s/m]*F_z scale: damping F = SLIP_DAMPING * F_z * c * V_sx (no source)


def _derivative(s: list[float], ctx: tuple) -> list[float]:  # type: ignore[type-arg]
    """Right-hand side of the vehicle ODE on plain floats (see module docstring)."""
    (consts, delta, tan_d, ddelta_sec2, cl, sl, cr, sr, td, tb, tyres, k_lock) = ctx
    (m, L, lf, lr, hw, R, Iw, sigma, mgf, mgr, mh, tw, v1, v2, drag, roll, iz) = consts
    _, _, yaw, vx, vy, r, w0, w1, w2, w3, k0, k1, k2, k3, axf, ayf = s

    # vertical loads (quasi-static transfer from filtered accelerations)
    fzf = mgr - mh * axf / L
    fzr = mgf + mh * axf / L
    dlat = mh * ayf / tw
    dlf = dlat * lr / L
    dlr = dlat * lf / L
    fz = (
        max(0.5 * fzf - dlf, 0.0),
        max(0.5 * fzf + dlf, 0.0),
        max(0.5 * fzr - dlr, 0.0),
        max(0.5 * fzr + dlr, 0.0),
    )

    # wheel-centre velocities (body frame) and along each wheel's heading
    u_l = vx - r * hw
    u_r = vx + r * hw
    v_f = vy + r * lf
    v_r = vy - r * lr
    vw = (u_l * cl + v_f * sl, u_r * cr + v_f * sr, u_l, u_r)

    # kinematic blend weight and axle slip angles (guarded denominator)
    if vx <= v1:
        wdyn = 0.0
    elif vx >= v2:
        wdyn = 1.0
    else:
        wdyn = (vx - v1) / (v2 - v1)
    if wdyn > 0.0:
        a_f = wdyn * (delta - math.atan(v_f / vx))
        a_r = wdyn * (-math.atan(v_r / vx))
    else:
        a_f = a_r = 0.0

    omegas = (w0, w1, w2, w3)
    kappas = (k0, k1, k2, k3)
    dw = [0.0, 0.0, 0.0, 0.0]
    dk = [0.0, 0.0, 0.0, 0.0]
    fbx_l = [0.0, 0.0, 0.0, 0.0]
    fby_l = [0.0, 0.0, 0.0, 0.0]
    atan = math.atan
    sin = math.sin
    for i in range(4):
        # per-wheel tyre constants: mu, 1/kappa_p, 1/alpha_p, Bx kappa_p, Cx, Ex, By alpha_p, ...
        mu, ikp, iap, bkx, cx, ex, bay, cy, ey = tyres[i]
        f_z = fz[i]
        kap = kappas[i]
        # combined slip, normalised-slip rule (tyre.combined_forces, inlined for speed)
        sx = kap * ikp
        sy = (a_f if i < 2 else a_r) * iap
        sn = math.sqrt(sx * sx + sy * sy)
        if sn > 1e-12 and f_z > 0.0:
            dmax = mu * f_z / sn
            bx = bkx * sn
            by = bay * sn
            fx = dmax * sx * sin(cx * atan(bx - ex * (bx - atan(bx))))
            fy = dmax * sy * sin(cy * atan(by - ey * (by - atan(by))))
        else:
            fx = fy = 0.0
        v_i = vw[i]
        omega = omegas[i]
        vsx = omega * R - v_i
        av = v_i if v_i >= 0.0 else -v_i
        if av < SLIP_DAMP_SPEED:
            fx += SLIP_DAMPING * f_z * (1.0 - av / SLIP_DAMP_SPEED) * vsx
        # transient slip (relaxation length)
        dki = (vsx - av * kap) / sigma
        if (kap >= KAPPA_LIMIT and dki > 0.0) or (kap <= -KAPPA_LIMIT and dki < 0.0):
            dki = 0.0
        dk[i] = dki
        # wheel spin: drive, brake (regularised Coulomb), tyre reaction
        tbi = tb[i]
        tbrk = k_lock * omega
        if tbrk > tbi:
            tbrk = tbi
        elif tbrk < -tbi:
            tbrk = -tbi
        dw[i] = (td[i] - tbrk - R * fx) / Iw
        # to body frame
        if i == 0:
            fbx_l[0] = fx * cl - fy * sl
            fby_l[0] = fx * sl + fy * cl
        elif i == 1:
            fbx_l[1] = fx * cr - fy * sr
            fby_l[1] = fx * sr + fy * cr
        else:
            fbx_l[i] = fx
            fby_l[i] = fy
    sum_fx = fbx_l[0] + fbx_l[1] + fbx_l[2] + fbx_l[3]
    sum_fy = fby_l[0] + fby_l[1] + fby_l[2] + fby_l[3]
    mz = (
        lf * (fby_l[0] + fby_l[1])
        - lr * (fby_l[2] + fby_l[3])
        + hw * (fbx_l[1] + fbx_l[3] - fbx_l[0] - fbx_l[2])
    )

    # resistance
    f_res = drag * vx * abs(vx)
    f_res += roll * (vx / 0.5 if abs(vx) < 0.5 else math.copysign(1.0, vx))

    dvx = (sum_fx - f_res) / m + r * vy
    dvy_dyn = sum_fy / m - r * vx
    dr_dyn = mz / iz
    if wdyn < 1.0:
        # kinematic bicycle (CG reference): r = v_x tan(d)/L, v_y = l_r r
        r_kin = vx * tan_d / L
        dr_k = (dvx * tan_d + vx * ddelta_sec2) / L
        dr_kin = dr_k + (r_kin - r) / TAU_KIN
        dvy_kin = lr * dr_k + (lr * r_kin - vy) / TAU_KIN
        dvy = wdyn * dvy_dyn + (1.0 - wdyn) * dvy_kin
        dr = wdyn * dr_dyn + (1.0 - wdyn) * dr_kin
    else:
        dvy = dvy_dyn
        dr = dr_dyn

    c, sn_y = math.cos(yaw), math.sin(yaw)
    ax = dvx - r * vy
    ay = dvy + r * vx
    return [
        vx * c - vy * sn_y,
        vx * sn_y + vy * c,
        r,
        dvx,
        dvy,
        dr,
        dw[0],
        dw[1],
        dw[2],
        dw[3],
        dk[0],
        dk[1],
        dk[2],
        dk[3],
        (ax - axf) / TAU_LOAD,
        (ay - ayf) / TAU_LOAD,
    ]
