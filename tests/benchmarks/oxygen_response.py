"""Benchmark of the oxygen-response fit (a separate command, not a test).

    python -m tests.benchmarks.oxygen_response [--rounds N] [--repeats N]

Prints, measured in the same run: the median time of ``orjson.loads`` of the demo Bundle (the
floor); of ``fit_oxygen_response`` on titrations of 2, 3 and 5 points (gases, oximetry and
both; what an assessment with serial points adds); of ``predict_oxygen_response`` on the
5-point fit; and, when scipy is installed, of one ``scipy.optimize.least_squares`` call on the
same 5-point residuals with the same analytic Jacobian (the library the hand-written solver
was measured against) and of importing ``scipy.optimize`` in a fresh interpreter. Each figure
is the median of ``--repeats`` interleaved runs, each the median of ``--rounds`` batches of 10,
in wall time and in the CPU time of this process: on a shared machine a millisecond-long call
is preempted far more often than the 14 µs floor, which inflates wall-time ratios under load;
CPU-time ratios hold steadier.
"""

from __future__ import annotations

import argparse
import random
import statistics
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import orjson

from service.physiology.oxygen_prediction import predict_oxygen_response
from service.physiology.oxygen_response import fit_oxygen_response
from service.physiology.titration import TitrationPoint
from tests.benchmarks.assess import median_us
from tests.physiology.oxygen_points import generated_points

BUNDLE = Path(__file__).resolve().parents[2] / "fixtures" / "demo" / "altitude-visitor.bundle.json"


def titrations() -> dict[str, list[TitrationPoint]]:
    """Invented titrations of a lung with 15 % shunt and ΔPO2 40 mmHg, with noise."""
    rng = random.Random(2025)
    shunt, drop = 0.15, 40.0
    return {
        "2 gases": generated_points(
            shunt=shunt,
            vq_drop_mmhg=drop,
            fio2s=(0.3, 0.5),
            kinds=("pao2",),
            rng=rng,
            pao2_relative_noise=0.04,
        ),
        "3 points, oximetry + gas": generated_points(
            shunt=shunt,
            vq_drop_mmhg=drop,
            fio2s=(0.25, 0.3, 0.4),
            kinds=("spo2", "spo2", "pao2"),
            rng=rng,
            spo2_noise=0.01,
        ),
        "5 points, oximetry + gases": generated_points(
            shunt=shunt,
            vq_drop_mmhg=drop,
            fio2s=(0.21, 0.25, 0.3, 0.4, 0.6),
            kinds=("spo2", "pao2"),
            rng=rng,
            spo2_noise=0.01,
            pao2_relative_noise=0.04,
        ),
    }


def scipy_call(points: list[TitrationPoint]) -> Callable[[], object] | None:
    """One scipy least-squares fit of the same residuals and Jacobian, or None without scipy."""
    try:
        import numpy as np
        from scipy.optimize import least_squares
    except ImportError:
        return None
    import service.physiology.oxygen_response as fitting
    from service.physiology.oxygen_exchange import STANDARD_CONDITIONS

    used = [fitting._observation(p, STANDARD_CONDITIONS, 0.02, 0.01) for p in points]
    max_drop = fitting._max_drop(used, STANDARD_CONDITIONS)

    def residuals(x: np.ndarray) -> np.ndarray:
        e = fitting._evaluate(used, float(x[0]), float(x[1]), STANDARD_CONDITIONS)
        return np.array(e.residuals) if e else np.full(len(used), 1e3)

    def jacobian(x: np.ndarray) -> np.ndarray:
        e = fitting._evaluate(used, float(x[0]), float(x[1]), STANDARD_CONDITIONS)
        return np.array([e.d_odds, e.d_drop]).T if e else np.zeros((len(used), 2))

    def fit() -> object:
        return least_squares(
            residuals, [0.1, 20.0], jac=jacobian, bounds=([0.0, 0.0], [19.0, max_drop])
        )

    return fit


def import_seconds(module: str) -> float:
    """Wall time of ``import module`` in a fresh interpreter, minus that of an empty one."""

    def run(code: str) -> float:
        start = time.perf_counter()
        subprocess.run([sys.executable, "-c", code], check=True)
        return time.perf_counter() - start

    return statistics.median(run(f"import {module}") - run("pass") for _ in range(3))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=100, help="batches of 10 per run")
    parser.add_argument("--repeats", type=int, default=5, help="interleaved runs per figure")
    args = parser.parse_args()
    raw = orjson.dumps(orjson.loads(BUNDLE.read_bytes()))
    cases = titrations()
    five = cases["5 points, oximetry + gases"]
    response = fit_oxygen_response(points=five)
    actions: dict[str, Callable[[], object]] = {"orjson.loads (floor)": lambda: orjson.loads(raw)}
    for name, points in cases.items():
        actions[f"fit, {name}"] = lambda points=points: fit_oxygen_response(points=points)  # type: ignore[misc]
    actions["predictions, 5-point fit"] = lambda: predict_oxygen_response(response=response)
    scipy_fit = scipy_call(five)
    if scipy_fit is not None:
        actions["scipy least_squares, 5 points"] = scipy_fit
    runs: dict[str, list[float]] = {name: [] for name in actions}
    cpu_runs: dict[str, list[float]] = {name: [] for name in actions}
    for _ in range(args.repeats):
        for name, action in actions.items():
            runs[name].append(median_us(action, args.rounds))
            cpu_runs[name].append(median_us(action, args.rounds, clock=time.process_time))
    floor = statistics.median(runs["orjson.loads (floor)"])
    cpu_floor = statistics.median(cpu_runs["orjson.loads (floor)"])
    print(f"floor: orjson.loads of {BUNDLE.name}, {len(raw)} bytes")
    print(f"{'':36s} {'wall time':>19s}  {'CPU time of this process':>26s}")
    for name in actions:
        wall = statistics.median(runs[name])
        cpu = statistics.median(cpu_runs[name])
        print(
            f"{name:36s} {wall:9.1f} µs {wall / floor:6.1f} ×"
            f"  {cpu:13.1f} µs {cpu / cpu_floor:6.1f} ×"
        )
    for name, points in cases.items():
        fitted = fit_oxygen_response(points=points)
        model = fitted.preferred.label if fitted.preferred else "nothing fitted"
        print(f"  {name}: {fitted.points_used} points used; {model}")
    if scipy_fit is not None:
        print(f"import scipy.optimize, fresh interpreter: {import_seconds('scipy.optimize'):.2f} s")


if __name__ == "__main__":
    main()
