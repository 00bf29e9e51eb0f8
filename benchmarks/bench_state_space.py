"""State-space operations of echoreo.scoring against general-purpose reference libraries.

Runs, on the same data, side by side: the delay by average mutual information, the
dimension by false nearest neighbours and by Cao's method, and recurrence
quantification at a 5 % recurrence rate, for a Lorenz x(t) series and a noisy sine
of N = 5,000 and 50,000 samples. Prints wall time, CPU time (all threads), peak
memory and the parameter each chose, and the ratio reference / ours.

References (whichever are installed; ``pip install -e ".[bench]"``):
neurokit2 (``complexity_delay`` method "fraser1986", ``complexity_dimension``
methods "fnn" and "afnn" = Cao), teaspoon (``MI_for_delay``, ``FNN_n``, ``FNN_n``
method "cao"), pyunicorn (``RecurrencePlot``; dense at N = 5,000, its sequential
``sparse_rqa`` mode at N = 50,000 because the dense N x N matrices need > 12 GB).
nolds has no AMI, FNN, Cao or RQA, so it is not among them.

Timing: each operation runs in a fresh process (spawned) after a warm-up call on a
short slice (imports and just-in-time compilation are not timed), then up to five
times, until three seconds have passed; the fastest run's wall and CPU time are
printed (the same rule for every library). Memory is measured from the process's own
peak resident set above its baseline after imports and data loading; the process's
address space is capped (``--mem-cap-gb``) so a reference that tries to allocate an
N x N matrix fails instead of swamping the machine, and a run that exceeds
``--timeout`` seconds is stopped and reported as such.

"Right answer" (used to pick the bar each operation must beat by 3x):
* delay: noisy sine (period 100 samples) within 2 samples of the quarter period 25
  (analytic); Lorenz (dt = 0.01 s) within 14-20 samples (0.14-0.20 s; our estimator
  converges to 0.16 s with fine bins at N = 50,000).
* dimension: Lorenz 3 (Kennel et al. 1992; Cao 1997). For the noisy sine no dimension
  is "right" (noise has none; the clean sine needs 2), so its bar is the fastest
  reference, whatever it chose.
* RQA: RR and DET equal ours to 1e-6 on the same vectors and threshold.

Usage: ``python benchmarks/bench_state_space.py [--sizes 5000 50000] [--timeout 300]``
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import os
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

LORENZ_DT = 0.01
SINE_PERIOD = 100.0
SINE_NOISE = 0.1
#: Every operation runs up to this many times; the fastest run is reported.
REPEATS = 5
#: ... but no run starts after this many seconds of runs.
REPEAT_BUDGET_S = 3.0


def lorenz_x(n: int, rng: np.random.Generator) -> np.ndarray:
    """x(t) of the Lorenz system (sigma 10, rho 28, beta 8/3), dt = 0.01 s, after 20 s."""
    from scipy.integrate import solve_ivp

    def rhs(_t, s):
        x, y, z = s
        return [10.0 * (y - x), x * (28.0 - z) - y, x * y - 8.0 / 3.0 * z]

    s0 = np.array([1.0, 1.0, 1.0]) + rng.uniform(-0.5, 0.5, 3)
    t = 20.0 + LORENZ_DT * np.arange(n)
    sol = solve_ivp(rhs, (0.0, t[-1]), s0, t_eval=t, rtol=1e-9, atol=1e-9, method="DOP853")
    return sol.y[0]


def noisy_sine(n: int, rng: np.random.Generator) -> np.ndarray:
    """sin(2 pi t / 100) plus white noise of standard deviation 0.1."""
    return np.sin(2.0 * np.pi * np.arange(n) / SINE_PERIOD) + SINE_NOISE * rng.standard_normal(n)


# ---------------------------------------------------------------- child process side


def _rounded(emb: np.ndarray) -> np.ndarray:
    """Embedding rounded to float32 and back: pyunicorn stores the time series in float32,
    so both libraries get the same coordinates and hence the same recurrences."""
    return np.ascontiguousarray(emb, dtype=np.float32).astype(np.float64)


def _rss_mb() -> float:
    with open("/proc/self/statm") as fh:
        return int(fh.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 1e6


def _peak_rss_mb() -> float:
    """VmHWM of this process (ru_maxrss would carry the parent's peak across exec)."""
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1e3
    return float("nan")


def _reset_peak() -> None:
    """Reset VmHWM to the current resident set (Linux clear_refs, value 5)."""
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
    except OSError:
        pass


def _prepare_call(task: dict, x: np.ndarray):
    """Import the library and return a zero-argument callable (imports are not timed)."""
    warnings.simplefilter("ignore")
    lib, op = task["lib"], task["op"]
    delay, dim = task.get("delay"), task.get("dim")
    if lib == "echoreo":
        from echoreo.scoring import choose_delay, choose_dimension, embed, rqa

        if op == "delay":
            return lambda: choose_delay(x)
        if op in ("fnn", "cao"):
            return lambda: choose_dimension(x, delay, method=op)
        emb = _rounded(embed(x, dim, delay))
        return lambda: rqa(emb, recurrence_rate=0.05)
    if lib == "neurokit2":
        import neurokit2 as nk

        if op == "delay":
            return lambda: nk.complexity_delay(x, delay_max=100, method="fraser1986")[0]
        method = "fnn" if op == "fnn" else "afnn"
        return lambda: nk.complexity_dimension(x, delay=delay, dimension_max=10,
                                               method=method)[0]
    if lib.startswith("teaspoon"):
        from teaspoon.parameter_selection import FNN_n, MI_delay

        if op == "delay":
            return lambda: MI_delay.MI_for_delay(x)
        if op == "fnn":
            threshold = 1 if lib == "teaspoon(1%)" else 10
            return lambda: FNN_n.FNN_n(x, delay, maxDim=10, threshold=threshold)[1]
        return lambda: FNN_n.FNN_n(x, delay, maxDim=10, method="cao")[1]
    if lib.startswith("pyunicorn"):
        from pyunicorn.timeseries import RecurrencePlot

        from echoreo.scoring import embed

        emb = _rounded(embed(x, dim, delay))
        sparse = lib == "pyunicorn(sparse)"

        def run():
            # pyunicorn counts d < eps, echoreo d <= eps: the next float up makes them equal.
            eps = np.nextafter(task["radius"], np.inf)
            rp = RecurrencePlot(emb, metric="supremum", threshold=eps, sparse_rqa=sparse,
                                silence_level=3)
            return {"RR": rp.recurrence_rate(), "DET": rp.determinism(l_min=2),
                    "L": rp.average_diaglength(l_min=2), "Lmax": rp.max_diaglength(),
                    "ENTR": rp.diag_entropy(l_min=2), "LAM": rp.laminarity(v_min=2),
                    "TT": rp.trapping_time(v_min=2)}

        return run
    raise ValueError(lib)


def _child(task: dict, queue) -> None:
    import resource

    cap = int(task["mem_cap_gb"] * 1e9)
    resource.setrlimit(resource.RLIMIT_AS, (cap, cap))
    try:
        x = np.load(task["data"])
        # Warm-up on a short slice: lazy imports and just-in-time compilation are not timed.
        _prepare_call(task, x[:600])()
        call = _prepare_call(task, x)
        _reset_peak()
        base = _rss_mb()
        # The same rule for every library: the best of up to REPEATS runs, fewer when a
        # run is slow (runs are repeated until REPEAT_BUDGET_S has passed); memory is the
        # peak over all of them.
        wall = cpu = float("inf")
        spent = 0.0
        for _ in range(REPEATS):
            w0, c0 = time.perf_counter(), time.process_time()
            value = call()
            w, c = time.perf_counter() - w0, time.process_time() - c0
            if w < wall:
                wall, cpu = w, c
            spent += w
            if spent >= REPEAT_BUDGET_S:
                break
        peak = max(0.0, _peak_rss_mb() - base)  # MB above the resident set before the runs
        if isinstance(value, dict):
            value = {k: float(v) for k, v in value.items()}
        elif value is not None:
            value = int(value)
        queue.put({"ok": True, "value": value, "wall": wall, "cpu": cpu, "peak_mb": peak})
    except BaseException as exc:  # report every failure of a reference, never crash
        queue.put({"ok": False, "error": f"{type(exc).__name__}: {str(exc)[:80]}"})


# ---------------------------------------------------------------- parent side


def run_task(task: dict, timeout: float) -> dict:
    ctx = mp.get_context("spawn")
    queue = ctx.Queue()
    proc = ctx.Process(target=_child, args=(task, queue))
    proc.start()
    deadline = time.monotonic() + timeout + 120.0  # imports are not part of the timeout
    result = None
    while time.monotonic() < deadline:
        try:
            result = queue.get(timeout=1.0)
            break
        except Exception:  # queue.Empty
            if not proc.is_alive():
                break
    if result is None:
        proc.kill()
        result = {"ok": False, "error": f"timeout (> {timeout:.0f} s); stopped"}
    proc.join(timeout=10)
    if result.get("ok") and result["wall"] > timeout:
        result["note"] = "over timeout"
    return result


def available(module: str) -> bool:
    try:
        __import__(module)
        return True
    except Exception:
        return False


def right(op: str, series: str, value) -> bool | None:
    if value is None:
        return None
    if op == "delay":
        return abs(value - SINE_PERIOD / 4) <= 2 if series == "noisy-sine" else 14 <= value <= 20
    if op in ("fnn", "cao"):
        return value == 3 if series == "lorenz" else None
    return None


def fmt(value) -> str:
    if isinstance(value, dict):
        return f"RR {value['RR']:.4f} DET {value['DET']:.4f} L {value['L']:.2f}"
    return str(value)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[5000, 50000])
    parser.add_argument("--timeout", type=float, default=300.0,
                        help="seconds a reference may run before it is stopped")
    parser.add_argument("--mem-cap-gb", type=float, default=8.0)
    args = parser.parse_args()

    libs = {"delay": ["echoreo", "neurokit2", "teaspoon"],
            "fnn": ["echoreo", "neurokit2", "teaspoon", "teaspoon(1%)"],
            "cao": ["echoreo", "neurokit2", "teaspoon"],
            "rqa": ["echoreo", "pyunicorn"]}
    have = {"neurokit2": available("neurokit2"), "teaspoon": available("teaspoon"),
            "pyunicorn": available("pyunicorn")}
    print(f"python {sys.version.split()[0]}, numpy {np.__version__}, cpus {os.cpu_count()}, "
          f"load average at start {os.getloadavg()[0]:.1f}")
    print("references installed: " + ", ".join(f"{k} {'yes' if v else 'no'}"
                                               for k, v in have.items()))
    print("time = wall seconds; cpu = CPU seconds of all threads; mem = peak resident "
          "memory above the process baseline (MB); ratio = reference / ours (wall, cpu)\n")
    header = (f"{'series':10s} {'N':>6s} {'op':5s} {'library':18s} {'chose':>34s} "
              f"{'time':>8s} {'cpu':>8s} {'mem':>7s} {'ratio':>13s} right")
    print(header)
    print("-" * len(header))
    tmp = Path(tempfile.mkdtemp(prefix="echoreo-bench-"))
    summary = []
    for series, make in (("lorenz", lorenz_x), ("noisy-sine", noisy_sine)):
        for n in args.sizes:
            x = make(n, np.random.default_rng(2026))
            data = tmp / f"{series}-{n}.npy"
            np.save(data, x)
            from echoreo import scoring

            delay = scoring.choose_delay(x)
            dim = scoring.choose_dimension(x, delay, method="fnn")
            emb = _rounded(scoring.embed(x, dim, delay))
            radius = scoring.recurrence_radius(emb, recurrence_rate=0.05)
            for op in ("delay", "fnn", "cao", "rqa"):
                ours = None
                rows = []
                for lib in libs[op]:
                    base = lib.split("(")[0]
                    if base != "echoreo" and not have.get(base, False):
                        continue
                    if lib == "pyunicorn" and n > 10000:
                        lib = "pyunicorn(sparse)"
                    task = {"data": str(data), "lib": lib, "op": op, "delay": delay,
                            "dim": dim, "radius": radius, "mem_cap_gb": args.mem_cap_gb}
                    res = run_task(task, args.timeout)
                    if lib == "echoreo":
                        ours = res
                    rows.append((lib, res))
                for lib, res in rows:
                    if not res.get("ok"):
                        print(f"{series:10s} {n:6d} {op:5s} {lib:18s} {res['error']:>34s}")
                        summary.append((series, n, op, lib, None, None, None))
                        continue
                    value = res["value"]
                    if op == "rqa" and lib != "echoreo" and ours and ours.get("ok"):
                        ok = all(abs(value[k] - ours["value"][k]) <= 1e-6 for k in ("RR", "DET"))
                    else:
                        ok = right(op, series, value)
                    ratio = ""
                    if lib != "echoreo" and ours and ours.get("ok"):
                        ratio = (f"{res['wall'] / max(ours['wall'], 1e-9):5.1f}x "
                                 f"{res['cpu'] / max(ours['cpu'], 1e-9):5.1f}x")
                    flag = {True: "yes", False: "no", None: "-"}[ok]
                    print(f"{series:10s} {n:6d} {op:5s} {lib:18s} {fmt(value):>34s} "
                          f"{res['wall']:8.4f} {res['cpu']:8.4f} {res['peak_mb']:7.0f} "
                          f"{ratio:>13s} {flag}", flush=True)
                    summary.append((series, n, op, lib, res["wall"], res["cpu"], ok))
    print("\nBar per operation: the fastest reference that gave the right answer "
          "(any reference where no answer is right); speed-up = its time / ours.")
    for series in ("lorenz", "noisy-sine"):
        for n in args.sizes:
            for op in ("delay", "fnn", "cao", "rqa"):
                rows = [r for r in summary if r[0] == series and r[1] == n and r[2] == op]
                ours = [r for r in rows if r[3] == "echoreo" and r[4] is not None]
                refs = [r for r in rows if r[3] != "echoreo" and r[4] is not None]
                if not ours:
                    continue
                good = [r for r in refs if r[6] is True]
                pool = good if good else [r for r in refs if r[6] is None]
                if not pool:
                    print(f"  {series:10s} {n:6d} {op:5s} no reference gave the right answer")
                    continue
                bar = min(pool, key=lambda r: r[5])
                o = ours[0]
                print(f"  {series:10s} {n:6d} {op:5s} bar {bar[3]:18s} speed-up "
                      f"wall {bar[4] / max(o[4], 1e-9):6.1f}x, cpu {bar[5] / max(o[5], 1e-9):6.1f}x"
                      f"{'' if good else '  (no right answer defined or given)'}")
    rqa_rows = [r for r in summary if r[2] == "rqa" and r[3] == "echoreo" and r[1] >= 50000]
    for r in rqa_rows:
        print(f"RQA goal, {r[0]} N={r[1]}: wall {r[4]:.1f} s, cpu {r[5]:.1f} s "
              f"(goal < 20 s); memory in the table above (goal < 1000 MB)")
    print(f"load average at end {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
