"""Forward kinematics + virtual IMU for one hour at 100 Hz, all sites of torso-e1.

Runs echoreo's vectorised path (one kinematics pass for all 360,000 samples,
then the IMU readings at every site) and a plain per-sample Python loop of the
same math (the same outward recursion, one sample at a time, small numpy
arrays). The loop is timed on a subset and extrapolated linearly to the full
length, which the output says. Joint rates come from the same cubic spline in
both paths; the spline is timed inside the vectorised figure and shared by the
loop (it is not part of the per-sample math).

    python benchmarks/bench_kinematics.py [--loop-samples 3000]
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

from echoreo.sim import STANDARD_GRAVITY, imus, joint_derivatives, load_robot


def trajectory(rng: np.random.Generator, n: int, rate_hz: float, robot):
    """A smooth random trajectory inside the limits (sums of slow sines)."""
    t = np.arange(n) / rate_hz
    mid = 0.5 * (robot.lower + robot.upper)
    half = 0.35 * (robot.upper - robot.lower)
    freq = rng.uniform(0.05, 0.4, size=(3, robot.n_joints))
    phase = rng.uniform(0, 2 * np.pi, size=(3, robot.n_joints))
    q = mid + half * np.mean([np.sin(2 * np.pi * f * t[:, None] + p)
                              for f, p in zip(freq, phase, strict=True)], axis=0)
    return t, q


def loop_imus(robot, q, qd, qdd):
    """Per-sample Python loop of the same outward recursion (see Robot.kinematics)."""
    joints = [robot._joints[i] for i in robot._order]
    cols = list(robot._order)
    g = np.array([0.0, 0.0, -STANDARD_GRAVITY])
    out = {s: (np.empty((len(q), 3)), np.empty((len(q), 3))) for s in robot.site_names}
    for k in range(len(q)):
        R = {robot.base_link: np.eye(3)}
        w = {robot.base_link: np.zeros(3)}
        al = {robot.base_link: np.zeros(3)}
        a = {robot.base_link: np.zeros(3)}
        for j, i in zip(joints, cols, strict=True):
            P, C = j["parent"], j["child"]
            th = q[k, i]
            local = j["Ro"] + np.sin(th) * j["RoK"] + (1 - np.cos(th)) * j["RoK2"]
            RC = R[P] @ local
            r = R[P] @ j["po"]
            u = RC @ j["axis"]
            R[C] = RC
            w[C] = w[P] + qd[k, i] * u
            al[C] = al[P] + qdd[k, i] * u + qd[k, i] * np.cross(w[P], u)
            a[C] = a[P] + np.cross(al[P], r) + np.cross(w[P], np.cross(w[P], r))
        for s in robot.site_names:
            spec = robot._sites[s]
            L = spec["link"]
            Rs = R[L] @ spec["R"]
            r = R[L] @ spec["p"]
            acc = a[L] + np.cross(al[L], r) + np.cross(w[L], np.cross(w[L], r))
            out[s][0][k] = Rs.T @ (acc - g)
            out[s][1][k] = Rs.T @ w[L]
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--loop-samples", type=int, default=3000,
                        help="samples the per-sample loop runs on (then extrapolated)")
    parser.add_argument("--repeats", type=int, default=5, help="vectorised runs (best taken)")
    args = parser.parse_args()

    robot = load_robot("torso-e1")
    rate, n = 100.0, 360_000
    t, q = trajectory(np.random.default_rng(20261201), n, rate, robot)

    best = best_cpu = np.inf
    for _ in range(args.repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        result = imus(robot, t, q)          # spline rates + FK + IMU at every site
        best = min(best, time.perf_counter() - t0)
        best_cpu = min(best_cpu, time.process_time() - c0)
    fk_s = np.inf
    for _ in range(args.repeats):
        t0 = time.perf_counter()
        robot.fk(q)
        fk_s = min(fk_s, time.perf_counter() - t0)
    spline_s = np.inf
    for _ in range(args.repeats):
        t0 = time.perf_counter()
        qd, qdd = joint_derivatives(t, q)
        spline_s = min(spline_s, time.perf_counter() - t0)

    m = min(args.loop_samples, n)
    t0 = time.perf_counter()
    ref = loop_imus(robot, q[:m], qd[:m], qdd[:m])
    loop_s = time.perf_counter() - t0
    loop_full = loop_s * n / m
    err = max(np.max(np.abs(ref[s][c] - result[s][c][:m]))
              for s in robot.site_names for c in (0, 1))

    print(f"load average (1 min) {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs "
          f"(wall times are the best of {args.repeats} runs)")
    print(f"robot {robot.name}: {robot.n_joints} joints, {len(robot.site_names)} sites "
          f"({', '.join(robot.site_names)}); {n} samples = 1 h at {rate:g} Hz")
    print(f"{'path':<44}{'time (s)':>12}{'samples/s':>14}")
    print(f"{'vectorised (spline rates + FK + 4 IMUs)':<44}{best:>12.3f}{n / best:>14,.0f}")
    print(f"{'  same, CPU time of this process':<44}{best_cpu:>12.3f}{n / best_cpu:>14,.0f}")
    print(f"{'  of which spline joint rates':<44}{spline_s:>12.3f}")
    print(f"{'FK alone (4 site transforms, Robot.fk)':<44}{fk_s:>12.3f}{n / fk_s:>14,.0f}")
    print(f"{'per-sample Python loop, extrapolated':<44}{loop_full:>12.1f}{n / loop_full:>14,.0f}")
    print(f"  (loop run on the first {m} samples in {loop_s:.3f} s, scaled by {n / m:g};"
          f" it reuses the vectorised spline rates)")
    print(f"ratio loop / vectorised: {loop_full / best:.0f}x   (goal >= 50x and < 1 s)")
    print(f"largest difference between the two paths: {err:.2e} (m/s^2 or rad/s)")


if __name__ == "__main__":
    main()
