"""Tests of the bicycle EKF: equality with filterpy, statistical consistency, robustness."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import chi2

from kinematic_monitor.core import model as m
from kinematic_monitor.core.ekf import BicycleEKF, FilterNoise, Innovation
from kinematic_monitor.core.model import VehicleParams

# invented test vehicle (our own numbers)
P = VehicleParams(wheelbase=2.7, cg_to_rear_axle=1.35, wheel_radius=0.31, track_width=1.55)
NOISE = FilterNoise()
POSE_R = np.diag([0.05**2, 0.05**2, 0.01**2])


def _inputs(t: float) -> tuple[float, float]:
    """True bicycle angle [rad] and CG speed [m/s] of a slalom with speed changes."""
    return 0.15 * math.sin(0.4 * t) + 0.05 * math.sin(1.3 * t), 8.0 + 3.0 * math.sin(0.1 * t)


def _complex_step_jacobian(h, x: np.ndarray) -> np.ndarray:
    """Jacobian by complex-step differentiation, exact to rounding (Squire & Trapp,
    'Using complex variables to estimate derivatives of real functions', SIAM Review 1998;
    from memory)."""
    eps = 1e-30
    cols = []
    for k in range(x.size):
        xc = x.astype(complex)
        xc[k] += 1j * eps
        cols.append(np.imag(np.asarray(h(xc), dtype=complex)) / eps)
    return np.array(cols).T


def _steer_true(xs, delta_meas):
    return delta_meas + P.steering_offset + xs[4]


def _h_pose(d):
    return lambda xs: np.array([xs[0] + d * np.cos(xs[2]), xs[1] + d * np.sin(xs[2]), xs[2]])


def test_equals_filterpy_extended_kalman_filter():
    from filterpy.kalman import ExtendedKalmanFilter

    d = -P.cg_to_rear_axle  # localisation reports the rear-axle centre
    ours = BicycleEKF(P, NOISE, reference_x=d)
    ours.initialise(0.0, 1.0, 2.0, 3.0, v=7.0, bias=0.01, pose_cov=POSE_R)

    class Reference(ExtendedKalmanFilter):
        def predict_x(self, u=0):
            dt, delta, speed = u
            xs = self.x
            xs[0], xs[1], xs[2] = m.step(xs[0], xs[1], xs[2], speed, _steer_true(xs, delta), dt, P)
            xs[3] = speed

    ref = Reference(dim_x=5, dim_z=3)
    ref.x = ours.state.copy()
    ref.P = ours.covariance.copy()

    def wrap_res(a, b):
        r = np.subtract(a, b)
        r[2] = math.remainder(r[2], 2 * math.pi)
        return r

    rng = np.random.default_rng(3)
    dt = 0.01
    delta = 0.0
    n_updates = 0
    for k in range(1, 1001):
        t = k * dt
        true_delta, speed = _inputs(t)
        delta = true_delta + rng.normal(0, 0.003)
        # F and Q built here from model.step_jacobian (checked against finite differences
        # in test_model.py), independently of the filter's own assembly
        xs = ref.x
        J = m.step_jacobian(xs[0], xs[1], xs[2], speed, _steer_true(xs, delta), dt, P)
        F = np.eye(5)
        F[:3, :3] = J[:, :3]
        F[:3, 4] = J[:, 4]
        F[3, 3] = 0.0
        G = np.zeros((5, 2))
        G[:3, 0] = J[:, 3]
        G[:3, 1] = J[:, 4]
        G[3, 0] = 1.0
        Q = G @ np.diag([NOISE.speed_std**2, NOISE.steer_std**2]) @ G.T
        Q += np.diag(
            [NOISE.pos_rw * dt, NOISE.pos_rw * dt, NOISE.yaw_rw * dt, 0.0, NOISE.bias_rw * dt]
        )
        ref.F, ref.Q = F, Q
        ref.predict(u=(dt, delta, speed))
        ours.predict(t, delta, speed)

        innov: Innovation | None = None
        if k % 2 == 0:
            hp = _h_pose(d)
            z = hp(ref.x) + rng.multivariate_normal(np.zeros(3), POSE_R)
            z[2] = math.remainder(z[2], 2 * math.pi)
            innov = ours.update_pose(*z, POSE_R)
            ref.update(
                z, lambda xs, h=hp: _complex_step_jacobian(h, xs), hp, R=POSE_R, residual=wrap_res
            )
        if innov is not None:
            n_updates += 1
            # filterpy ExtendedKalmanFilter.update (Joseph form) as the reference
            np.testing.assert_allclose(innov.residual, ref.y, atol=1e-9)
            np.testing.assert_allclose(innov.covariance, ref.S, atol=1e-9, rtol=1e-9)
            assert innov.nis == pytest.approx(float(ref.y @ ref.SI @ ref.y), rel=1e-9, abs=1e-9)
            assert innov.dof == ref.y.size
        diff = ours.state - ref.x
        diff[2] = math.remainder(diff[2], 2 * math.pi)
        np.testing.assert_allclose(diff, 0.0, atol=1e-9)
        np.testing.assert_allclose(ours.covariance, ref.P, atol=1e-9, rtol=1e-9)
    assert n_updates == 500


# --- simulation with known noise -----------------------------------------------------------


def _simulate(
    rng: np.random.Generator,
    duration: float,
    bias_true: float,
    noise: FilterNoise = NOISE,
    x0_error: bool = True,
):
    """Run the filter on data drawn from its own model; returns (filter, pose NIS, truth)."""
    dt = 0.01
    n = NOISE  # the data always follow these noise levels
    truth = np.array([5.0, -3.0, 0.7, _inputs(0.0)[1], bias_true])
    ekf = BicycleEKF(P, noise)
    start = truth.copy()
    if x0_error:
        p0 = np.diag(
            [n.init_pos_std, n.init_pos_std, n.init_yaw_std, n.init_speed_std, n.init_bias_std]
        )
        start = truth + p0 @ rng.normal(size=5)
    start[4] = 0.0  # the filter starts unaware: its bias error is the injected offset
    ekf.initialise(0.0, *start[:3], v=start[3], bias=start[4])
    pose_nis = []
    for k in range(1, int(round(duration / dt)) + 1):
        t = k * dt
        d_true, v_true = _inputs(t - dt)  # inputs held over the interval
        truth[0], truth[1], truth[2] = m.step(*truth[:3], v_true, d_true, dt, P)
        truth[:2] += rng.normal(0, math.sqrt(n.pos_rw * dt), 2)
        truth[2] = math.remainder(truth[2] + rng.normal(0, math.sqrt(n.yaw_rw * dt)), 2 * math.pi)
        truth[3] = v_true
        delta_meas = d_true - P.steering_offset - bias_true + rng.normal(0, n.steer_std)
        speed_meas = v_true + rng.normal(0, n.speed_std)
        ekf.predict(t, delta_meas, speed_meas)
        if k % 2 == 0:
            z = truth[:3] + rng.multivariate_normal(np.zeros(3), POSE_R)
            pose_nis.append(ekf.update_pose(*z, POSE_R).nis)
    return ekf, np.array(pose_nis), truth


def _two_sided_95(dof: int, k: int) -> tuple[float, float]:
    # time-averaged NIS: K * mean ~ chi2(K * dof) (Bar-Shalom, Li, Kirubarajan 2001,
    # ch. 5, chapter number from memory); bounds from scipy.stats.chi2
    return chi2.ppf(0.025, k * dof) / k, chi2.ppf(0.975, k * dof) / k


def test_bound_helper_matches_check_sources_value():
    # CHECK_SOURCES.md [C]: two-sided 95 %, n_z = 3, K = 100 -> [2.5391, 3.4987]
    lo, hi = _two_sided_95(3, 100)
    assert lo == pytest.approx(2.5391, abs=1e-4) and hi == pytest.approx(3.4987, abs=1e-4)


def test_time_averaged_nis_inside_chi_square_bounds():
    rng = np.random.default_rng(20240611)
    _, pose_nis, _ = _simulate(rng, 40.0, bias_true=0.01)
    lo, hi = _two_sided_95(3, pose_nis.size)
    assert lo <= pose_nis.mean() <= hi, (lo, pose_nis.mean(), hi)


def test_nees_consistent_over_monte_carlo_runs():
    rng = np.random.default_rng(11)
    runs = 25
    nees = []
    for _ in range(runs):
        bias = rng.normal(0, NOISE.init_bias_std)
        ekf, _, truth = _simulate(rng, 4.0, bias_true=bias)
        err = truth - ekf.state
        err[2] = math.remainder(err[2], 2 * math.pi)
        nees.append(float(err @ np.linalg.solve(ekf.covariance, err)))
    # NEES averaged over N runs: N * mean ~ chi2(N * n_x) (Bar-Shalom, Li, Kirubarajan 2001,
    # ch. 5, chapter number from memory)
    lo, hi = _two_sided_95(5, runs)
    assert lo <= np.mean(nees) <= hi, (lo, np.mean(nees), hi)


def test_steering_bias_state_converges_and_helps():
    injected = 0.02  # rad, a steering-angle sensor offset
    ekf, pose_nis, _ = _simulate(np.random.default_rng(5), 30.0, injected, x0_error=False)
    sigma = math.sqrt(ekf.covariance[4, 4])
    assert abs(ekf.steering_bias - injected) < max(3 * sigma, 1e-3)
    assert sigma < 0.002
    # without the bias state (bias frozen at 0) the same data are inconsistent: the
    # time-averaged NIS leaves the 95 % chi-square bounds (Bar-Shalom et al. 2001, ch. 5,
    # chapter number from memory), while the full filter stays inside
    frozen = FilterNoise(init_bias_std=1e-9, bias_rw=0.0)
    _, frozen_pose_nis, _ = _simulate(
        np.random.default_rng(5), 30.0, injected, noise=frozen, x0_error=False
    )
    lo, hi = _two_sided_95(3, pose_nis.size)
    assert lo <= pose_nis.mean() <= hi
    assert frozen_pose_nis.mean() > hi


def test_covariance_stays_symmetric_positive_definite():
    rng = np.random.default_rng(2)
    ekf = BicycleEKF(P, NOISE)
    ekf.initialise(0.0, 0.0, 0.0, 0.0)
    tiny = np.diag([1e-12, 1e-12, 1e-14])  # nearly perfect localisation stresses the update
    for k in range(1, 2001):
        t = k * 0.01
        ekf.predict(t, 0.2 * math.sin(t), 10.0)
        if k % 5 == 0:
            ekf.update_pose(ekf.x + rng.normal(0, 1e-6), ekf.y, ekf.yaw, tiny)
        cov = ekf.covariance
        # symmetric positive definite (Cholesky succeeds; common practice, no source)
        assert np.array_equal(cov, cov.T)
        np.linalg.cholesky(cov)
        assert np.all(np.isfinite(ekf.state))


def test_yaw_wrap_across_pi_gives_small_innovation():
    ekf = BicycleEKF(P, NOISE)
    ekf.initialise(0.0, 0.0, 0.0, math.pi - 0.01)
    innov = ekf.update_pose(0.0, 0.0, -math.pi + 0.01, POSE_R)
    # shortest angular difference, REP 103 yaw in radians
    assert innov.residual[2] == pytest.approx(0.02, abs=1e-12)
    assert -math.pi <= ekf.yaw < math.pi
    # driving through the +-pi boundary keeps yaw wrapped and innovations small
    for k in range(1, 101):
        t = k * 0.05
        ekf.predict(t, 0.3, 5.0)
        innov = ekf.update_pose(ekf.x, ekf.y, ekf.yaw, POSE_R)
        assert abs(innov.residual[2]) < 1e-9
        assert -math.pi <= ekf.yaw < math.pi


def test_reference_point_models_follow_rigid_body_kinematics():
    d = -P.cg_to_rear_axle
    ekf = BicycleEKF(P, NOISE, reference_x=d)
    ekf.initialise(0.0, 10.0, 5.0, 0.4, v=6.0, pose_cov=POSE_R)
    # rear axle = CG - l_r (cos, sin)(yaw): the stored CG is l_r ahead of the measured point
    assert (ekf.x, ekf.y) == pytest.approx(m.cg_position(10.0, 5.0, 0.4, P))
    ekf.predict(0.1, 0.2, 6.0)
    # a measured rear-axle pose equal to the prediction's rear-axle point: zero innovation
    rx, ry = m.rear_axle_position(ekf.x, ekf.y, ekf.yaw, P)
    innov = ekf.update_pose(rx, ry, ekf.yaw, POSE_R)
    np.testing.assert_allclose(innov.residual, 0.0, atol=1e-12)


def test_initialise_reset_and_equal_stamp():
    ekf = BicycleEKF(P)
    assert not ekf.initialised and math.isnan(ekf.stamp)
    with pytest.raises(RuntimeError, match="initialise"):
        ekf.predict(0.0, 0.0, 1.0)
    ekf.initialise(1.0, 1.0, 2.0, 7.0, v=3.0)
    assert ekf.yaw == pytest.approx(7.0 - 2 * math.pi)
    assert (ekf.x, ekf.y, ekf.v, ekf.steering_bias) == (1.0, 2.0, 3.0, 0.0)
    before = ekf.state
    ekf.predict(1.0, 0.1, 5.0)  # same stamp: inputs recorded, no motion
    np.testing.assert_array_equal(ekf.state, before)
    assert ekf.last_steer == 0.1 and ekf.steer() == pytest.approx(0.1)
    F, Q = ekf.transition(0.1, 0.1, 5.0)
    assert F.shape == Q.shape == (5, 5)
    np.testing.assert_array_equal(ekf.state, before)  # transition() has no side effect
    ekf.reset()
    assert not ekf.initialised
    with pytest.raises(RuntimeError):
        ekf.update_pose(0.0, 0.0, 0.0, POSE_R)


@pytest.mark.parametrize(
    "call,match",
    [
        (lambda f: f.predict(2.0, float("nan"), 1.0), "delta"),
        (lambda f: f.predict(2.0, 0.1, float("inf")), "speed"),
        (lambda f: f.predict(2.0, 0.9, 1.0), "max_road_wheel_angle"),
        (lambda f: f.predict(0.5, 0.1, 1.0), "earlier"),
        (lambda f: f.update_pose(float("nan"), 0.0, 0.0, POSE_R), "x="),
        (lambda f: f.update_pose(0.0, 0.0, 0.0, [[1.0, 0.0], [0.0, 1.0]]), "pose covariance"),
        (lambda f: f.update_pose(0.0, 0.0, 0.0, np.full((3, 3), np.nan)), "non-finite"),
        (lambda f: f.update_pose(0.0, 0.0, 0.0, [[1, 2, 0], [0, 1, 0], [0, 0, 1]]), "symmetric"),
        (lambda f: f.update_pose(0.0, 0.0, 0.0, -np.eye(3) * 1e3), "symmetric"),
    ],
)
def test_bad_input_raises_value_error_naming_it(call, match):
    ekf = BicycleEKF(P, NOISE)
    ekf.initialise(1.0, 0.0, 0.0, 0.0)
    state = ekf.state
    with pytest.raises(ValueError, match=match):
        call(ekf)
    np.testing.assert_array_equal(ekf.state, state)  # rejected input leaves no trace


def test_non_positive_definite_innovation_rejected():
    ekf = BicycleEKF(P, NOISE)
    ekf.initialise(0.0, 0.0, 0.0, 0.0)
    # symmetric with non-negative diagonal but indefinite, and large enough to beat H P H^T
    bad = np.array([[1.0, 50.0, 0.0], [50.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
    with pytest.raises(ValueError, match="positive definite"):
        ekf.update_pose(0.0, 0.0, 0.0, bad)


@pytest.mark.parametrize(
    "kwargs,field",
    [
        (dict(steer_std=-1.0), "steer_std"),
        (dict(pos_rw=float("nan")), "pos_rw"),
        (dict(init_pos_std=0.0), "init_pos_std"),
    ],
)
def test_filter_noise_validation_names_field(kwargs, field):
    with pytest.raises(ValueError, match=field):
        FilterNoise(**kwargs)


def test_reference_x_must_be_finite():
    with pytest.raises(ValueError, match="reference_x"):
        BicycleEKF(P, NOISE, reference_x=float("nan"))


def test_small_inverse_matches_numpy_and_detects_indefinite():
    from kinematic_monitor.core.ekf import _inv_sym3 as inv_sym

    n = 3
    upper = np.triu_indices(n)
    rng = np.random.default_rng(n)
    for _ in range(50):
        A = rng.normal(size=(n, n))
        S = A @ A.T + 0.1 * np.eye(n)
        # reference: numpy.linalg.inv
        expected = np.linalg.inv(S)[upper]
        np.testing.assert_allclose(inv_sym(*S[upper]), expected, rtol=1e-10, atol=1e-12)
        # smallest eigenvalue -0.5: indefinite (eigenvalues from numpy.linalg.eigvalsh)
        indefinite = S - (np.linalg.eigvalsh(S)[0] + 0.5) * np.eye(n)
        assert inv_sym(*indefinite[upper]) is None
    assert inv_sym(*(-np.eye(n))[upper]) is None  # negative definite
    assert inv_sym(*np.zeros((n, n))[upper]) is None  # singular


def test_covariance_spd_after_10000_random_steps():
    """Random inputs, stamps and measurement covariances (incl. correlated, near-singular
    and far off measurements) for 10 000 steps; the covariance stays symmetric positive
    definite (numpy.linalg.cholesky succeeds; common practice, no source) and finite."""
    rng = np.random.default_rng(7)
    ekf = BicycleEKF(P, NOISE, reference_x=-P.cg_to_rear_axle)
    ekf.initialise(0.0, 0.0, 0.0, 0.0, v=5.0)

    def random_cov(n: int) -> np.ndarray:
        A = rng.normal(size=(n, n)) * 10.0 ** rng.uniform(-6, 0, size=(n, 1))
        return A @ A.T + 10.0 ** rng.uniform(-14, -2) * np.eye(n)

    t = 0.0
    for k in range(10_000):
        t += float(rng.choice([0.0, rng.uniform(1e-4, 0.05), rng.uniform(0.05, 1.0)]))
        ekf.predict(t, float(rng.uniform(-0.6, 0.6)), float(rng.uniform(-5.0, 40.0)))
        u = rng.uniform()
        if u < 0.2:
            pose = np.array([ekf.x, ekf.y, ekf.yaw]) + rng.normal(0, 0.5, 3)
            ekf.update_pose(*pose.tolist(), random_cov(3))
        if k % 50 == 0 or k == 9_999:
            cov = ekf.covariance
            assert np.array_equal(cov, cov.T)
            np.linalg.cholesky(cov)
            assert np.all(np.isfinite(ekf.state)) and -math.pi <= ekf.yaw < math.pi


def test_covariance_inputs_other_than_float64_arrays_are_validated_alike():
    ekf = BicycleEKF(P, NOISE)
    ekf.initialise(0.0, 0.0, 0.0, 0.0, v=5.0)
    other = BicycleEKF(P, NOISE)
    other.initialise(0.0, 0.0, 0.0, 0.0, v=5.0)
    # nested lists, and asymmetric within the 1e-9 relative tolerance
    almost = POSE_R.tolist()
    almost[0][1] = 1e-15
    a = ekf.update_pose(0.1, 0.2, 0.01, almost)
    b = other.update_pose(0.1, 0.2, 0.01, POSE_R)
    np.testing.assert_allclose(a.residual, b.residual, rtol=1e-12)
    np.testing.assert_allclose(ekf.covariance, other.covariance, rtol=1e-6, atol=1e-15)
    c = ekf.update_pose(0.1, 0.2, 0.01, POSE_R.astype(np.float32))
    d = other.update_pose(0.1, 0.2, 0.01, POSE_R.tolist())
    assert c.nis == pytest.approx(d.nis, rel=1e-5)
    assert isinstance(c, Innovation) and c == Innovation(c.residual, c.covariance, c.nis, 3)
    assert c.covariance.shape == (3, 3) and c.residual.shape == (3,)
    with pytest.raises(ValueError, match="pose covariance is not a symmetric"):
        ekf.update_pose(0.1, 0.2, 0.0, [[1e-4, 1e-3, 0.0], [0.0, 1e-4, 0.0], [0.0, 0.0, 1e-4]])
    with pytest.raises(ValueError, match="pose covariance contains non-finite"):
        ekf.update_pose(0.1, 0.2, 0.0, np.diag([np.inf, 1.0, 1.0]))
    with pytest.raises(ValueError, match="pose_cov"):
        ekf.initialise(0.0, 0.0, 0.0, 0.0, pose_cov=np.eye(2))


def test_update_pose_diag_is_update_pose_with_a_diagonal_covariance() -> None:
    # the NIS-only pose update must be the very same arithmetic as update_pose with
    # cov = diag(var_xy, var_xy, var_yaw) (same state, covariance and NIS to the bit)
    rng = np.random.default_rng(7)
    for _ in range(50):
        a = BicycleEKF(P, reference_x=float(rng.uniform(-1.5, 0.0)))
        b = BicycleEKF(P, reference_x=a.reference_x)
        for f in (a, b):
            f.initialise(0.0, 1.0, 2.0, 0.3, v=5.0)
            f.predict(0.05, 0.05, 5.0)
        x, y, yaw = rng.normal(1.2, 0.3), rng.normal(2.1, 0.3), rng.normal(0.3, 0.05)
        vxy, vyaw = rng.uniform(1e-4, 1.0), rng.uniform(1e-6, 0.1)
        nis = a.update_pose_diag(x, y, yaw, vxy, vyaw)
        inn = b.update_pose(x, y, yaw, np.diag([vxy, vxy, vyaw]))
        assert nis == inn.nis
        assert np.array_equal(a.state, b.state)
        assert np.array_equal(a.covariance, b.covariance)
    with pytest.raises(ValueError):
        a.update_pose_diag(0.0, 0.0, 0.0, -1.0, 0.1)


def test_pose_covariance_is_the_pose_block_of_the_covariance() -> None:
    # the array-free accessor must give exactly covariance[:3, :3] (row-major)
    ekf = BicycleEKF(P, reference_x=-1.2)
    ekf.initialise(0.0, 1.0, 2.0, 0.3, v=5.0)
    for k in range(1, 40):
        ekf.predict(0.01 * k, 0.1 * math.sin(0.1 * k), 5.0)
        if k % 5 == 0:
            ekf.update_pose(ekf.x + 0.01, ekf.y - 0.02, ekf.yaw, np.diag([1e-2, 1e-2, 1e-3]))
    block = ekf.covariance[:3, :3].reshape(-1)
    assert ekf.pose_covariance() == tuple(float(c) for c in block)
