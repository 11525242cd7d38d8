"""Race eqbatch against its peers on the same cases, in one process, and
write the figures down.

    python -m bench.run            # full run: writes bench/RESULTS.md and bench/throughput.png
    python -m bench.run --smoke    # seconds: small sizes, writes under bench/out/

Every engine gets the same inputs (feed, ln K, P), the same tolerance
(max |ln Q - ln K| <= 1e-10) and the same interior start where it takes one,
and all cores. Times are the best of a few repeats, after a warm-up (numba's
compilation is not counted). No test asserts a time.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import eqbatch
import numpy as np

from bench import workloads
from bench.peers import common, numba_lean, numba_newton, numpy_newton, scipy_loop
from bench.peers.common import Problem

HERE = Path(__file__).resolve().parent


@dataclass
class Run:
    engine: str
    workload: str
    n_cases: int
    seconds: float
    converged: float
    iterations: float
    disagreement: float = float("nan")
    extra: dict = field(default_factory=dict)

    @property
    def per_case_us(self) -> float:
        return 1e6 * self.seconds / self.n_cases

    @property
    def rate(self) -> float:
        return self.n_cases / self.seconds


def best_of(fn, repeats: int, times: list[float] | None = None):
    """Best wall time of `repeats` calls, and the last output. Each call's
    output is kept until the next call returns (as `result = solve(...)` in
    a loop does). `times`, when given, receives every call's time."""
    best, out = float("inf"), None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        dt = time.perf_counter() - t0
        best = min(best, dt)
        if times is not None:
            times.append(dt)
    return best, out


def system_for(problem: Problem) -> eqbatch.ReactionSystem:
    species = list(problem.species)
    if problem.equations:
        return eqbatch.ReactionSystem(species, list(problem.equations), P0=problem.P0)
    equations = []
    for row in problem.nu:
        left = " + ".join(f"{-c:g} {s}" for c, s in zip(row, species) if c < 0)
        right = " + ".join(f"{c:g} {s}" for c, s in zip(row, species) if c > 0)
        equations.append(f"{left} = {right}")
    return eqbatch.ReactionSystem(species, equations, P0=problem.P0, check_balance=False)


def disagreement(amounts: np.ndarray, reference: np.ndarray, ok: np.ndarray) -> float:
    """Largest relative difference on species above 1e-9 of their case's total,
    over the cases both engines solved."""
    if not ok.any():
        return float("nan")
    a, b = amounts[ok], reference[ok]
    big = b > 1e-9 * b.sum(axis=1, keepdims=True)
    return float(np.max(np.abs(a - b)[big] / b[big]))


def run_eqbatch(problem: Problem, repeats: int, threads: int | None = None) -> tuple[Run, np.ndarray]:
    system = system_for(problem)
    system.solve(problem.feed[:10], lnK=problem.lnK[:10], P=problem.P[:10])
    times = []
    seconds, res = best_of(
        lambda: system.solve(problem.feed, lnK=problem.lnK, P=problem.P, threads=threads), repeats, times
    )
    name = "eqbatch" if threads is None else f"eqbatch ({threads} thread{'s' if threads > 1 else ''})"
    run = Run(
        name,
        problem.name,
        problem.n_cases,
        seconds,
        float(res.converged.mean()),
        float(res.iterations.mean()),
        extra={"first": times[0]},
    )
    return run, res


def run_peer(name: str, module, problem: Problem, reference, repeats: int, xi0: np.ndarray) -> Run:
    if name.startswith("numba"):
        module.solve(problem.subset(8), xi0[:8])  # compile outside the clock
    seconds, (amounts, converged, iterations) = best_of(lambda: module.solve(problem, xi0), repeats)
    both = converged & reference.converged[: problem.n_cases]
    return Run(
        name,
        problem.name,
        problem.n_cases,
        seconds,
        float(converged.mean()),
        float(np.mean(iterations)),
        disagreement(amounts, reference.amounts[: problem.n_cases], both),
    )


# Peers written for one workload only, raced on that workload alone.
LEAN = "numba-lean (hand-written 2x2)"  # issue 14: bench/peers/numba_lean.py
ONE_SYSTEM_PEERS = {"reforming": ((LEAN, numba_lean),)}


def race(problem: Problem, sizes: dict[str, int], repeats: int) -> list[Run]:
    runs = []
    ours, reference = run_eqbatch(problem, repeats)
    runs.append(ours)
    xi0 = common.interior_start(problem)
    peers = (("numba", numba_newton),) + ONE_SYSTEM_PEERS.get(problem.name, ())
    for name, module in peers + (("numpy", numpy_newton), ("scipy loop", scipy_loop)):
        n = min(sizes[name], problem.n_cases)
        runs.append(
            run_peer(
                name, module, problem.subset(n), reference, 1 if name == "scipy loop" else repeats, xi0[:n]
            )
        )
    return runs


def lean_duel(problem: Problem, turns: int) -> dict:
    """Workload (a) on one thread and on all threads, eqbatch against the lean
    hand-written numba peer (issue 14). The four runs take turns (eqbatch on
    one thread, the peer on one thread, eqbatch on all threads, the peer on
    all threads), so that all see the same machine; best of `turns` calls
    each. eqbatch's threads are its `threads=` argument (None: all cores); the
    peer's are numba's, set with numba.set_num_threads for the call and
    restored afterwards. Each call's output is kept until the next call of the
    same engine and thread count returns."""
    import numba

    system = system_for(problem)
    numba_all = numba.get_num_threads()

    def call(engine: str, threads: int | None):
        if engine == "eqbatch":
            return system.solve(problem.feed, lnK=problem.lnK, P=problem.P, threads=threads)
        numba.set_num_threads(threads or numba_all)
        try:
            return numba_lean.solve(problem)
        finally:
            numba.set_num_threads(numba_all)

    # Warm-up outside the clock: numba compiles the kernel on its first call.
    system.solve(problem.feed[:10], lnK=problem.lnK[:10], P=problem.P[:10])
    small = problem.subset(8)
    for threads in (1, None):
        numba.set_num_threads(threads or numba_all)
        try:
            numba_lean.solve(small)
        finally:
            numba.set_num_threads(numba_all)

    keys = [("eqbatch", 1), (LEAN, 1), ("eqbatch", None), (LEAN, None)]
    best = dict.fromkeys(keys, float("inf"))
    last = {}
    for _ in range(turns):
        for key in keys:
            t0 = time.perf_counter()
            last[key] = call(*key)
            best[key] = min(best[key], time.perf_counter() - t0)

    def converged(key) -> float:
        out = last[key]
        return float((out.converged if key[0] == "eqbatch" else out[1]).mean())

    figures = {"n": problem.n_cases, "turns": turns, "cores": os.cpu_count(), "numba_threads": numba_all}
    for label, threads in (("one", 1), ("all", None)):
        ours, theirs = best[("eqbatch", threads)], best[(LEAN, threads)]
        figures[label] = {
            "eqbatch_s": ours,
            "lean_s": theirs,
            "ratio": theirs / ours,
            "eqbatch_converged": converged(("eqbatch", threads)),
            "lean_converged": converged((LEAN, threads)),
        }
    return figures


def single_call(problem: Problem, calls: int, rounds: int) -> dict[str, float]:
    """Cost of one system.solve(...) from Python on one case, against one
    scipy.optimize.root call on the same case, one solve() call on that case
    with sensitivities=True and one solve() call on that case repeated 100
    times (as arrays). Each figure is the best of `rounds` blocks (the mean
    call time of a block of calls); the blocks of the four kinds take turns,
    so that all see the same machine."""
    system = system_for(problem)
    feed, lnk, P = problem.feed[0], problem.lnK[0], float(problem.P[0])
    feed100, lnk100, P100 = np.tile(feed, (100, 1)), np.tile(lnk, (100, 1)), np.full(100, P)
    xi0 = common.interior_start(problem.subset(1))[0]
    one, one_sens, hundred = system.prepare(), system.prepare(sensitivities=True), system.prepare(100)
    kinds = {
        "eqbatch": (lambda: system.solve(feed, lnK=lnk, P=P), calls),
        "sensitivities": (lambda: system.solve(feed, lnK=lnk, P=P, sensitivities=True), calls),
        "hundred": (lambda: system.solve(feed100, lnK=lnk100, P=P100), calls),
        "prepared": (lambda: one.solve(feed, lnK=lnk, P=P), calls),
        "prepared_sensitivities": (lambda: one_sens.solve(feed, lnK=lnk, P=P), calls),
        "prepared_hundred": (lambda: hundred.solve(feed100, lnK=lnk100, P=P100), calls),
        "scipy_root": (
            lambda: scipy_loop.solve_case(problem.nu, feed, lnk, P, problem.P0, xi0),
            max(calls // 50, 20),
        ),
    }
    for fn, _ in kinds.values():
        for _ in range(20):
            fn()
    best = dict.fromkeys(kinds, float("inf"))
    for _ in range(rounds):
        for kind, (fn, total) in kinds.items():
            block = max(total // rounds, 2)
            t0 = time.perf_counter()
            for _ in range(block):
                fn()
            best[kind] = min(best[kind], (time.perf_counter() - t0) / block)
    plain, prepared = best["eqbatch"], best["prepared"]
    return {
        "eqbatch_us": 1e6 * plain,
        "scipy_root_us": 1e6 * best["scipy_root"],
        "sensitivities_us": 1e6 * best["sensitivities"],
        "hundred_us": 1e6 * best["hundred"],
        "ratio": best["scipy_root"] / plain,
        "sensitivities_ratio": best["sensitivities"] / plain,
        "hundred_ratio": best["hundred"] / plain,
        "prepared_us": 1e6 * prepared,
        "prepared_sensitivities_us": 1e6 * best["prepared_sensitivities"],
        "prepared_hundred_us": 1e6 * best["prepared_hundred"],
        "prepared_ratio": best["scipy_root"] / prepared,
        "prepared_sensitivities_ratio": best["prepared_sensitivities"] / prepared,
        "prepared_hundred_ratio": best["prepared_hundred"] / prepared,
        "rounds": rounds,
    }


def take_turns(kinds: dict, turns: int) -> tuple[dict, dict]:
    """Run each of ``kinds`` (name -> call) in turn, ``turns`` times: the best
    time of each and its last result."""
    best = dict.fromkeys(kinds, float("inf"))
    results = {}
    for _ in range(turns):
        for kind, fn in kinds.items():
            t0 = time.perf_counter()
            results[kind] = fn()
            best[kind] = min(best[kind], time.perf_counter() - t0)
    return best, results


def temperature_driven(n: int, n_adiabatic: int, turns: int) -> dict:
    """Issue 15's figures: the demo reformer (Shomate data for every species),
    workload (a)'s ranges; solve given ln K against solve given T (ln K from
    the species data in the core), an approach solve and an adiabatic solve,
    taking turns, best of ``turns`` each."""
    from eqbatch.demo import reformer_system

    system = reformer_system()
    rng = np.random.default_rng(15)
    T, P = rng.uniform(700.0, 1200.0, n), rng.uniform(1.0, 40.0, n)
    feed = np.zeros((n, len(system.species)))
    feed[:, system.species.index("CH4")] = 1.0
    feed[:, system.species.index("H2O")] = rng.uniform(1.5, 5.0, n)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", eqbatch.ExtrapolationWarning)
        lnk = system.lnK(T)
        label = system.labels[0]
        m = n_adiabatic
        kinds = {
            "lnK": lambda: system.solve(feed, lnK=lnk, P=P),
            "lnK_eval": lambda: system.lnK(T),
            "T": lambda: system.solve(feed, T=T, P=P),
            "approach": lambda: system.solve(feed, T=T, P=P, approach={label: 10.0}),
            "adiabatic": lambda: system.solve(feed[:m], T=T[:m], P=P[:m], adiabatic=True),
        }
        best, results = take_turns(kinds, turns)
    adiabatic = results["adiabatic"]
    return {
        "n": n,
        "n_adiabatic": m,
        "turns": turns,
        "seconds": best,
        "T_ratio": best["lnK"] / best["T"],
        "approach_ratio": best["lnK"] / best["approach"],
        "adiabatic_ratio": (m / best["adiabatic"]) / (n / best["T"]),
        "converged": {k: float(np.mean(results[k].converged)) for k in ("lnK", "T", "approach")},
        "adiabatic_converged": float(np.mean(adiabatic.converged)),
    }


def condensed_phases(n: int, systems: int, network_cases: int, turns: int) -> dict:
    """Issue 16's figures. (1) The demo reformer with graphite and the cracking
    reaction against the reformer alone on the same cases (S/C 0.5-5, so some
    cases deposit carbon), taking turns, best of ``turns``. (2) Random
    networks with one to three pure condensed species, ln K +-30: the share of
    cases converged. (3) A random nine-reaction network with a third of its
    species liquid against the same network all gas, ln K +-50."""
    from eqbatch.demo import reformer_system
    from eqbatch.speciesdata import MaierKelley

    base = reformer_system()
    # graphite, Cp = a + bT + d/T^2 (Kelley 1960, from memory), CODATA S298
    graphite = MaierKelley(a=17.15, b=4.27e-3, d=-8.79e5, dHf=0.0, S298=5.74, T_max=2500.0, source="graphite")
    with_c = eqbatch.ReactionSystem(
        [*base.species, "C"],
        {**dict(zip(base.labels, base.equations)), "cracking": "CH4 = C + 2 H2"},
        phases={"C": "solid"},
        species_data={**base.species_data, "C": graphite},
    )
    rng = np.random.default_rng(16)
    T, P = rng.uniform(700.0, 1200.0, n), rng.uniform(1.0, 40.0, n)
    feed = np.zeros((n, len(base.species)))
    feed[:, 0] = 1.0
    feed[:, 1] = rng.uniform(0.5, 5.0, n)
    feed_c = np.column_stack([feed, np.zeros(n)])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", eqbatch.ExtrapolationWarning)
        lnk, lnk_c = base.lnK(T), with_c.lnK(T)
    kinds = {
        "reformer": lambda: base.solve(feed, lnK=lnk, P=P),
        "with graphite": lambda: with_c.solve(feed_c, lnK=lnk_c, P=P),
    }
    best, results = take_turns(kinds, turns)
    carbon = results["with graphite"]

    # random networks with condensed species
    total = converged = 0
    for k in range(systems):
        p = workloads.random_network(60, n_reactions=int(rng.integers(2, 6)), seed=1000 + k)
        pure = rng.choice(len(p.species), size=int(rng.integers(1, 4)), replace=False)
        phases = {p.species[i]: ("solid" if rng.uniform() < 0.7 else "pure_liquid") for i in pure}
        system = eqbatch.ReactionSystem(
            list(p.species), [str(e) for e in system_for(p).equations], phases=phases, check_balance=False
        )
        f = p.feed * (rng.uniform(size=p.feed.shape) < 0.6)
        f[f.sum(axis=1) == 0, 0] = 1.0
        lk = p.lnK + rng.uniform(-30.0, 30.0, p.lnK.shape)
        res = system.solve(f, lnK=lk, P=p.P)
        total += len(res)
        converged += int(res.converged.sum())

    # gas + liquid against all gas, the same cases
    net = workloads.random_network(network_cases, n_reactions=9, seed=9)
    lk = net.lnK + rng.uniform(-50.0, 50.0, net.lnK.shape)
    liquid = {s: "liquid" for s in net.species if rng.uniform() < 1 / 3}
    equations = list(system_for(net).equations)
    two = {
        "all gas": eqbatch.ReactionSystem(list(net.species), equations, check_balance=False),
        "gas + liquid": eqbatch.ReactionSystem(
            list(net.species), equations, phases=liquid, check_balance=False
        ),
    }
    net_best, net_results = take_turns(
        {
            kind: (lambda system=system: system.solve(net.feed, lnK=lk, P=net.P))
            for kind, system in two.items()
        },
        turns,
    )
    net_converged = {kind: float(np.mean(res.converged)) for kind, res in net_results.items()}
    return {
        "n": n,
        "turns": turns,
        "seconds": best,
        "ratio": best["reformer"] / best["with graphite"],
        "carbon_share": float(np.mean(carbon.present[:, 1])),
        "converged": {k: float(np.mean(r.converged)) for k, r in results.items()},
        "random_cases": total,
        "random_converged": converged / total,
        "network_cases": network_cases,
        "network_seconds": net_best,
        "network_converged": net_converged,
        "liquid_species": len(liquid),
        "network_ratio": net_best["gas + liquid"] / net_best["all gas"],
    }


def real_gas(n: int, turns: int) -> dict:
    """Issue 17's figures: an ammonia converter (3:1 H2:N2 give or take,
    some NH3 recycled; 650-800 K, 100-300 bar; ln K from the
    Gillespie-Beattie correlation) with Peng-Robinson against the ideal-gas
    solve of the same cases, taking turns, best of ``turns``."""
    # critical constants (Poling, Prausnitz and O'Connell, 5th ed., from memory)
    critical = {
        "N2": {"Tc": 126.2, "Pc": 33.98, "omega": 0.0372},
        "H2": {"Tc": 33.19, "Pc": 13.13, "omega": -0.216},
        "NH3": {"Tc": 405.4, "Pc": 113.53, "omega": 0.256},
    }
    species, reaction = ["N2", "H2", "NH3"], ["N2 + 3 H2 = 2 NH3"]
    systems = {
        "ideal gas": eqbatch.ReactionSystem(species, reaction, P0=1.01325),
        "Peng-Robinson": eqbatch.ReactionSystem(
            species, reaction, P0=1.01325, gas_model="peng-robinson", critical=critical
        ),
    }
    rng = np.random.default_rng(17)
    T, P = rng.uniform(650.0, 800.0, n), rng.uniform(100.0, 300.0, n)
    log10_ka = -2.691122 * np.log10(T) - 5.519265e-5 * T + 1.848863e-7 * T**2 + 2001.6 / T + 2.6899
    lnk = (2.0 * np.log(10.0) * log10_ka)[:, None]
    feed = np.column_stack([np.ones(n), rng.uniform(2.5, 3.5, n), rng.uniform(0.0, 0.1, n)])
    best, results = take_turns(
        {kind: (lambda s=s: s.solve(feed, lnK=lnk, T=T, P=P)) for kind, s in systems.items()}, turns
    )
    return {
        "n": n,
        "turns": turns,
        "seconds": best,
        "converged": {k: float(np.mean(r.converged)) for k, r in results.items()},
        "iterations": {k: float(np.mean(r.iterations)) for k, r in results.items()},
        "ratio": best["ideal gas"] / best["Peng-Robinson"],
    }


MEMORY_CHILD = """
import gc, sys, time
sys.path.insert(0, {root!r})
import eqbatch
from bench import workloads


def status(key):
    for line in open("/proc/self/status"):
        if line.startswith(key):
            return int(line.split()[1]) * 1024


n = {n}
p = workloads.reforming(n)
system = eqbatch.ReactionSystem(list(p.species), list(p.equations), P0=p.P0)
system.solve(p.feed[:100], lnK=p.lnK[:100], P=p.P[:100])
inputs = p.feed.nbytes + p.lnK.nbytes + p.P.nbytes
gc.collect()
with open("/proc/self/clear_refs", "w") as fh:
    fh.write("5")  # reset the peak resident set (VmHWM) to the current one
before = status("VmRSS")
t0 = time.perf_counter()
res = system.solve(p.feed, lnK=p.lnK, P=p.P)
seconds = time.perf_counter() - t0
peak = status("VmHWM")
# What the solve returns (mole fractions are computed when first read).
outputs = sum(a.nbytes for a in (res.amounts, res.extents, res.status, res.iterations))
print(dict(n=n, seconds=seconds, inputs=inputs, outputs=outputs, rss_before=before, peak=peak,
           converged=float(res.converged.mean())))
"""


def peak_memory(n: int) -> dict:
    code = MEMORY_CHILD.format(root=str(HERE.parent), n=n)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    import ast

    return ast.literal_eval(out.stdout.strip().splitlines()[-1])  # the child prints a dict


SWEEP_CHILD = """
import sys, time
sys.path.insert(0, {root!r})
import numpy as np, pyarrow as pa, pyarrow.parquet as pq
from eqbatch.demo import reformer_system
from eqbatch.sweeps import sweep


def status(key):
    for line in open("/proc/self/status"):
        if line.startswith(key):
            return int(line.split()[1]) * 1024


n, path, mode = {n}, {path!r}, {mode!r}
system = reformer_system()
system.solve([0.98, 2.9, 0, 0, 0, 0.02], T=900.0, P=10.0)
base = status("VmRSS")
t0 = time.perf_counter()
if mode == "sweep":
    summary = sweep(system, path, path + ".out", overwrite=True, quiet=True)
    rows = summary.rows
else:
    t = pq.read_table(path)
    feed = np.zeros((t.num_rows, 6))
    for k, name in enumerate(system.species):
        if "feed_" + name in t.column_names:
            feed[:, k] = t.column("feed_" + name).to_numpy()
    res = system.solve(feed, T=t.column("T_K").to_numpy(), P=t.column("P_bar").to_numpy())
    rows = len(res)
seconds = time.perf_counter() - t0
print(dict(rows=rows, seconds=seconds, peak_over_base=status("VmHWM") - base))
"""


def sweep_figures(sizes: list[int], folder: Path) -> list[dict]:
    """End-to-end Parquet sweep against the in-memory solve of the same cases,
    and the sweep's peak memory for growing files (fresh processes)."""
    import ast

    import pyarrow as pa
    import pyarrow.parquet as pq

    rows = []
    for n in sizes:
        rng = np.random.default_rng(n)
        path = folder / f"sweep_{n}.parquet"
        pq.write_table(
            pa.table(
                {
                    "feed_CH4": np.full(n, 0.98),
                    "feed_H2O": rng.uniform(1.5, 5, n) * 0.98,
                    "feed_CO": np.zeros(n),
                    "feed_H2": np.zeros(n),
                    "feed_CO2": np.zeros(n),
                    "feed_N2": np.full(n, 0.02),
                    "T_K": rng.uniform(700, 1200, n),
                    "P_bar": rng.uniform(1, 40, n),
                }
            ),
            path,
        )
        entry = {"n": n}
        for mode in ("memory", "sweep"):
            code = SWEEP_CHILD.format(root=str(HERE.parent), n=n, path=str(path), mode=mode)
            out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
            entry[mode] = ast.literal_eval(out.stdout.strip().splitlines()[-1])
        rows.append(entry)
        path.unlink()
        Path(str(path) + ".out").unlink(missing_ok=True)
    return rows


def machine() -> dict[str, str]:
    model = platform.processor() or "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    import numba
    import scipy

    return {
        "CPU": model,
        "cores": str(os.cpu_count()),
        "Python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "numba": numba.__version__,
        "eqbatch": eqbatch.__version__,
        # The lane kernel's instruction set, chosen when the library loads
        # ("avx512", "avx2" or "portable"); older builds do not report it.
        "vector path": getattr(eqbatch._core, "VECTOR_PATH", "unknown"),
    }


def plot(path: Path, scaling: list[Run], network_runs: list[Run]) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, (left, right) = plt.subplots(1, 2, figsize=(11, 4.2))
    for engine in sorted({r.engine for r in scaling}):
        rows = sorted((r for r in scaling if r.engine == engine), key=lambda r: r.n_cases)
        left.loglog([r.n_cases for r in rows], [r.rate for r in rows], "o-", label=engine)
    left.set_xlabel("cases")
    left.set_ylabel("cases per second")
    left.set_title("Workload (a): throughput against batch size")
    left.grid(True, which="both", alpha=0.3)
    left.legend()
    for engine in sorted({r.engine for r in network_runs}):
        rows = sorted((r for r in network_runs if r.engine == engine), key=lambda r: r.extra["reactions"])
        right.semilogy(
            [r.extra["reactions"] for r in rows], [r.per_case_us for r in rows], "o-", label=engine
        )
    right.set_xlabel("reactions")
    right.set_ylabel("microseconds per case")
    right.set_title("Workload (c): cost against network size")
    right.grid(True, which="both", alpha=0.3)
    right.legend()
    fig.tight_layout()
    fig.savefig(path, dpi=110)


def table(runs: list[Run], reference: Run) -> str:
    lines = [
        "| engine | cases | cases/s | per case | eqbatch is faster by | converged | mean iterations | max rel. disagreement |",
        "|---|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for r in runs:
        ratio = r.per_case_us / reference.per_case_us
        lines.append(
            f"| {r.engine} | {r.n_cases:,} | {r.rate:,.0f} | {r.per_case_us:.3g} us | "
            f"{'-' if r is reference else f'{ratio:.3g}x'} | {100 * r.converged:.2f} % | {r.iterations:.2f} | "
            f"{'-' if r is reference else f'{r.disagreement:.1e}'} |"
        )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--smoke", action="store_true", help="tiny sizes, for CI (seconds)")
    parser.add_argument("--out", type=Path, default=None, help="folder for RESULTS.md and the PNG")
    args = parser.parse_args(argv)
    smoke = args.smoke
    out = args.out or (HERE / "out" if smoke else HERE)
    out.mkdir(parents=True, exist_ok=True)
    repeats = 1 if smoke else 3
    n_a = 2_000 if smoke else 1_000_000
    sizes = {
        "numba": n_a,
        LEAN: n_a,
        "numpy": 1_000 if smoke else 100_000,
        "scipy loop": 100 if smoke else 2_000,
    }

    report = ["# Benchmark results", ""]
    report.append(
        "Reproduce with `python -m bench.run` (needs `pip install '.[bench]'`). "
        "Engines: eqbatch; numba `@njit(parallel=True)` Newton specialised to the system; "
        "on workload (a) also a lean hand-written numba kernel for that one system (2x2 Newton in "
        "closed form, 0.95 fraction to the boundary, no line search, its own start); "
        "numpy-vectorised damped Newton; a Python loop over `scipy.optimize.root` (hybr). "
        "Peers are in `bench/peers/`. Same equations, tolerance (max |ln Q - ln K| <= 1e-10) "
        "and interior start; all cores for every engine; best of "
        f"{repeats} repeat(s); numba compilation excluded."
    )
    report += ["", "## Machine", ""]
    machine_info = machine()
    for k, v in machine_info.items():
        report.append(f"- {k}: {v}")

    # (a) reforming + shift
    problem_a = workloads.reforming(n_a)
    runs_a = race(problem_a, sizes, repeats)
    ours = runs_a[0]
    report += [
        "",
        f"## Workload (a): steam reforming + shift, {n_a:,} cases",
        "",
        "700-1200 K, 1-40 bar, steam-to-carbon 1.5-5, N2 inert; K(T) from the Xu-Froment correlations.",
        "",
        table(runs_a, ours),
    ]
    by = {r.engine: r for r in runs_a}
    numba_ratio = by["numba"].per_case_us / ours.per_case_us
    scipy_ratio = by["scipy loop"].per_case_us / ours.per_case_us

    # threads
    # One and two threads take turns, so that both see the same machine (this
    # VM's speed drifts by 20-30 % over seconds); best of several turns each.
    one = two = None
    for _ in range(1 if smoke else 7):
        one_now, _ = run_eqbatch(problem_a, 1, threads=1)
        two_now, _ = run_eqbatch(problem_a, 1, threads=2)
        one = one_now if one is None or one_now.seconds < one.seconds else one
        two = two_now if two is None or two_now.seconds < two.seconds else two
    thread_ratio = one.seconds / two.seconds

    # eqbatch against the lean hand-written peer (issue 14), one thread and all
    # threads, the engines and thread counts taking turns
    duel = lean_duel(problem_a, 1 if smoke else 7)

    # scaling in N: the sizes take turns (five rounds, best call of each
    # size), so that the machine's drift over the minutes of the run (20-30 %
    # on this VM) reaches every size alike; small sizes get several calls per
    # round (at 1e3 cases one solve takes well under a millisecond). The first
    # call of each size is reported beside the best: at 1e7 the first two calls
    # take fresh memory from the system (the earlier result is still held
    # while the next is solved); later ones reuse freed output memory, as
    # every size below 1e6 does.
    sizes_n = [1_000, 10_000] if smoke else [1_000, 10_000, 100_000, 1_000_000, 10_000_000]
    problems_n = {n: workloads.reforming(n) for n in sizes_n}
    systems_n = {n: system_for(p) for n, p in problems_n.items()}
    best_n = {n: float("inf") for n in sizes_n}
    first_n, last_n = {}, {}
    for _ in range(1 if smoke else 5):
        for n in sizes_n:
            p, system = problems_n[n], systems_n[n]
            times = []
            _, last_n[n] = best_of(
                lambda p=p, system=system: system.solve(p.feed, lnK=p.lnK, P=p.P),
                max(1, min(20, 100_000 // n)),
                times,
            )
            first_n.setdefault(n, times[0])
            best_n[n] = min(best_n[n], min(times))
    scaling = []
    for n in sizes_n:
        p, res = problems_n[n], last_n[n]
        scaling.append(
            Run(
                "eqbatch",
                p.name,
                n,
                best_n[n],
                float(res.converged.mean()),
                float(res.iterations.mean()),
                extra={"first": first_n[n]},
            )
        )
        if n <= (10_000 if smoke else 1_000_000):
            xi0 = common.interior_start(p)
            numba_newton.solve(p.subset(8), xi0[:8])
            seconds, (a, c, it) = best_of(lambda p=p, xi0=xi0: numba_newton.solve(p, xi0), repeats)
            scaling.append(Run("numba", p.name, n, seconds, float(c.mean()), float(it.mean())))
    del problems_n, systems_n, last_n
    ours_scaling = [r for r in scaling if r.engine == "eqbatch" and r.n_cases >= 1_000]
    per_case = [r.per_case_us for r in ours_scaling]
    linear_spread = max(per_case) / min(per_case) - 1

    # single call
    single = single_call(problem_a, 2_000 if smoke else 20_000, 3 if smoke else 10)

    # temperature-driven solves (issue 15)
    thermo = temperature_driven(2_000 if smoke else 1_000_000, 200 if smoke else 1_000_000, 1 if smoke else 5)

    # condensed phases (issue 16)
    condensed = condensed_phases(
        2_000 if smoke else 1_000_000, 10 if smoke else 400, 500 if smoke else 5_000, 1 if smoke else 5
    )

    # real gases (issue 17)
    gases = real_gas(2_000 if smoke else 1_000_000, 1 if smoke else 5)

    # memory
    memory = peak_memory(20_000 if smoke else 10_000_000)

    # Parquet sweeps: end-to-end throughput and peak memory
    sweeps = sweep_figures([20_000, 50_000] if smoke else [500_000, 2_000_000], out)

    # (b) five reactions
    problem_b = workloads.five_reactions(2_000 if smoke else 200_000)
    # The numpy peer keeps iterating on the cases it cannot converge, so it gets fewer.
    runs_b = race(
        problem_b,
        {"numba": problem_b.n_cases, "numpy": sizes["numpy"] // 10, "scipy loop": sizes["scipy loop"]},
        repeats,
    )

    # (c) networks of growing size
    network_runs = []
    for n_reactions in [2, 5] if smoke else [2, 5, 10, 20]:
        p = workloads.random_network(500 if smoke else 20_000, n_reactions=n_reactions)
        run, reference = run_eqbatch(p, repeats)
        run.extra["reactions"] = p.nu.shape[0]
        network_runs.append(run)
        xi0 = common.interior_start(p)
        peer = run_peer("numba", numba_newton, p, reference, repeats, xi0)
        peer.extra["reactions"] = p.nu.shape[0]
        network_runs.append(peer)

    report += [
        "",
        "### Targets on workload (a)",
        "",
        "| target | measured | met |",
        "|---|---|---|",
        f"| >= 1.5x the numba peer | {numba_ratio:.2f}x | {'yes' if numba_ratio >= 1.5 else 'no'} |",
        f"| >= 500x the scipy loop per case | {scipy_ratio:,.0f}x | {'yes' if scipy_ratio >= 500 else 'no'} |",
        f"| every case converged | {100 * ours.converged:.4f} % | {'yes' if ours.converged == 1 else 'no'} |",
        f"| >= 1.8x on 2 threads vs 1 | {thread_ratio:.2f}x ({one.seconds:.3f} s vs {two.seconds:.3f} s) | "
        f"{'yes' if thread_ratio >= 1.8 else 'no'} |",
        f"| per-case time within 20 % from 1e3 to 1e7 cases | spread {100 * linear_spread:.0f} % | "
        f"{'yes' if linear_spread <= 0.2 else 'no'} |",
    ]

    def met(ok: bool) -> str:
        return "yes" if ok else "no"

    all_label = f"all threads ({duel['cores']} cores)"
    report += [
        "",
        "### eqbatch against the lean hand-written peer",
        "",
        f"Workload (a), {duel['n']:,} cases, against `bench/peers/numba_lean.py`. The runs take turns "
        "(eqbatch on one thread, the peer on one thread, eqbatch on all threads, the peer on all "
        f"threads); best of {duel['turns']} turn(s) each. One thread: `threads=1` for eqbatch, "
        "`numba.set_num_threads(1)` around the peer's call. All threads: eqbatch's default (all "
        f"cores) and numba's {duel['numba_threads']} thread(s).",
        "",
        "| threads | eqbatch cases/s | lean peer cases/s | eqbatch is faster by | converged (eqbatch / peer) |",
        "|---|---:|---:|---:|---:|",
    ]
    for label, d in (("one thread", duel["one"]), (all_label, duel["all"])):
        report.append(
            f"| {label} | {duel['n'] / d['eqbatch_s']:,.0f} | {duel['n'] / d['lean_s']:,.0f} | "
            f"{d['ratio']:.2f}x | {100 * d['eqbatch_converged']:.2f} % / {100 * d['lean_converged']:.2f} % |"
        )
    report += [
        "",
        "### Targets of issue 14",
        "",
        "Single calls on the first case of workload (a): each the best of "
        f"{single['rounds']} blocks of calls (the mean call time of a block), the kinds taking turns. "
        "The 100-case call solves that case repeated 100 times, as arrays. `solve()` is "
        "`system.solve(...)`; prepared is `system.prepare(...).solve(...)` (options checked and "
        "outputs made once, for an optimiser's repeated calls; the same bits).",
        "",
        "| target | measured | met |",
        "|---|---|---|",
        f"| >= 1.5x the lean peer on one thread | {duel['one']['ratio']:.2f}x | {met(duel['one']['ratio'] >= 1.5)} |",
        f"| >= 1.5x the lean peer on all threads | {duel['all']['ratio']:.2f}x | "
        f"{met(duel['all']['ratio'] >= 1.5)} |",
        f"| one solve() call >= 100x faster than one scipy root call | {single['eqbatch_us']:.1f} us vs "
        f"{single['scipy_root_us']:,.0f} us ({single['ratio']:,.0f}x) | {met(single['ratio'] >= 100)} |",
        f"| sensitivities=True at most 2x the plain call | {single['sensitivities_us']:.1f} us vs "
        f"{single['eqbatch_us']:.1f} us ({single['sensitivities_ratio']:.2f}x) | "
        f"{met(single['sensitivities_ratio'] <= 2)} |",
        f"| a 100-case call at most 3x a single-case call | {single['hundred_us']:.1f} us vs "
        f"{single['eqbatch_us']:.1f} us ({single['hundred_ratio']:.2f}x) | {met(single['hundred_ratio'] <= 3)} |",
        f"| one prepared call >= 100x faster than one scipy root call | {single['prepared_us']:.1f} us vs "
        f"{single['scipy_root_us']:,.0f} us ({single['prepared_ratio']:,.0f}x) | "
        f"{met(single['prepared_ratio'] >= 100)} |",
        f"| prepared with sensitivities at most 2x the plain prepared call | "
        f"{single['prepared_sensitivities_us']:.1f} us vs {single['prepared_us']:.1f} us "
        f"({single['prepared_sensitivities_ratio']:.2f}x) | {met(single['prepared_sensitivities_ratio'] <= 2)} |",
        f"| a 100-case prepared call at most 3x a single-case prepared call | "
        f"{single['prepared_hundred_us']:.1f} us vs {single['prepared_us']:.1f} us "
        f"({single['prepared_hundred_ratio']:.2f}x) | {met(single['prepared_hundred_ratio'] <= 3)} |",
    ]

    sec = thermo["seconds"]
    report += [
        "",
        "### Temperature-driven solves (issue 15)",
        "",
        f"The demo's reformer (Shomate data for every species) on {thermo['n']:,} cases of workload (a)'s "
        "ranges: `solve(feed, lnK=...)` with ln K computed beforehand, against `solve(feed, T=...)`, which "
        "evaluates ln K from the species data in the core; an approach solve (10 K on reforming: the "
        "feed of methane and steam fixes the direction reforming runs, so one solve at the approach "
        "temperatures) and an adiabatic solve "
        f"({thermo['n_adiabatic']:,} cases: extents and outlet temperature in one Newton iteration in "
        f"the core, scalar code per case; it has no vector-lane version yet). Kinds take turns, "
        f"best of {thermo['turns']}.",
        "",
        "| call | seconds | per case | converged |",
        "|---|---:|---:|---:|",
        f"| `system.lnK(T)` alone | {sec['lnK_eval']:.3f} | {1e6 * sec['lnK_eval'] / thermo['n']:.3g} us | - |",
        f"| `solve(feed, lnK=..., P=...)` | {sec['lnK']:.3f} | {1e6 * sec['lnK'] / thermo['n']:.3g} us | "
        f"{100 * thermo['converged']['lnK']:.2f} % |",
        f"| `solve(feed, T=..., P=...)` | {sec['T']:.3f} | {1e6 * sec['T'] / thermo['n']:.3g} us | "
        f"{100 * thermo['converged']['T']:.2f} % |",
        f"| `solve(..., approach=...)` | {sec['approach']:.3f} | "
        f"{1e6 * sec['approach'] / thermo['n']:.3g} us | {100 * thermo['converged']['approach']:.2f} % |",
        f"| `solve(..., adiabatic=True)` | {sec['adiabatic']:.3f} | "
        f"{1e6 * sec['adiabatic'] / thermo['n_adiabatic']:.3g} us | "
        f"{100 * thermo['adiabatic_converged']:.2f} % |",
        "",
        "| target | measured | met |",
        "|---|---|---|",
        f"| `solve(T=...)` at least 0.8x the throughput of `solve(lnK=...)` | {thermo['T_ratio']:.2f}x | "
        f"{met(thermo['T_ratio'] >= 0.8)} |",
        f"| adiabatic at least 0.3x the throughput of the isothermal solve | {thermo['adiabatic_ratio']:.3f}x | "
        f"{met(thermo['adiabatic_ratio'] >= 0.3)} |",
    ]
    cs = condensed["seconds"]
    report += [
        "",
        "### Condensed phases (issue 16)",
        "",
        f"The demo's reformer with graphite (C, phase solid) and `CH4 = C + 2 H2` against the reformer "
        f"alone, {condensed['n']:,} cases (T 700-1200 K, P 1-40 bar, steam 0.5-5 per CH4; carbon present "
        f"in {100 * condensed['carbon_share']:.1f} % of them), taking turns, best of {condensed['turns']}. "
        f"Random networks (2-5 reactions, one to three species solid or pure liquid, ln K +-30, "
        f"{condensed['random_cases']:,} cases). A random nine-reaction, thirteen-species network with "
        f"{condensed['liquid_species']} species liquid against the same network all gas, "
        f"{condensed['network_cases']:,} cases, ln K +-50.",
        "",
        "| call | seconds | cases/s | converged |",
        "|---|---:|---:|---:|",
        *(
            f"| {kind} | {cs[kind]:.3f} | {condensed['n'] / cs[kind]:,.0f} | "
            f"{100 * condensed['converged'][kind]:.3f} % |"
            for kind in cs
        ),
        *(
            f"| network, {kind} | {sec:.3f} | {condensed['network_cases'] / sec:,.0f} | "
            f"{100 * condensed['network_converged'][kind]:.3f} % |"
            for kind, sec in condensed["network_seconds"].items()
        ),
        "",
        "| target | measured | met |",
        "|---|---|---|",
        f"| reformer with graphite at least 0.5x the throughput without it | {condensed['ratio']:.2f}x | "
        f"{met(condensed['ratio'] >= 0.5)} |",
        f"| random networks with condensed phases: 100 % converged | "
        f"{100 * condensed['random_converged']:.3f} % | {met(condensed['random_converged'] == 1.0)} |",
        f"| gas + liquid within 2x the all-gas time | {condensed['network_ratio']:.2f}x | "
        f"{met(condensed['network_ratio'] <= 2.0)} |",
    ]
    gs = gases["seconds"]
    report += [
        "",
        "### Real gases (issue 17)",
        "",
        f"An ammonia converter, {gases['n']:,} cases (650-800 K, 100-300 bar, H2:N2 2.5-3.5, NH3 "
        "0-0.1 in the feed; ln K from the Gillespie-Beattie correlation), Peng-Robinson against the "
        f"ideal-gas solve of the same cases, taking turns, best of {gases['turns']}.",
        "",
        "| call | seconds | cases/s | converged | Newton iterations a case |",
        "|---|---:|---:|---:|---:|",
        *(
            f"| {kind} | {gs[kind]:.3f} | {gases['n'] / gs[kind]:,.0f} | "
            f"{100 * gases['converged'][kind]:.3f} % | {gases['iterations'][kind]:.1f} |"
            for kind in gs
        ),
        "",
        "| target | measured | met |",
        "|---|---|---|",
        f"| Peng-Robinson at least 0.25x the ideal-gas throughput | {gases['ratio']:.3f}x | "
        f"{met(gases['ratio'] >= 0.25)} |",
        f"| 100 % converged | {100 * gases['converged']['Peng-Robinson']:.3f} % | "
        f"{met(gases['converged']['Peng-Robinson'] == 1.0)} |",
    ]
    report += [
        "",
        "### Where the speed comes from",
        "",
        "Measured on workload (a) while the engine was built (callgrind instruction counts, "
        "or one-thread runs of `rust/core/examples/reforming_batch.rs`; see DEVELOPERS.md):",
        "",
        "| change | per case |",
        "|---|---|",
        "| generic general path | 12.7k instructions |",
        "| line search reusing the trial point's logarithms, L D L^T, specialised kernels, "
        "branch-free residuals, basis re-derived only when needed | 9.9k instructions |",
        "| log path for shrinking pivots | 4.64 -> 4.44 iterations |",
        "| lean scalar path (same iteration, fixed-size arrays, no phase/floor bookkeeping; since removed) | 8.5k instructions, "
        "0.98 -> 1.14 M cases/s on one thread |",
        "| lane kernel: 8 cases per vector group (AVX-512 / AVX2+FMA, run-time dispatch), "
        "inlined vector logarithm, streaming refill | 1.14 -> 1.75 M cases/s on one thread "
        "(5.27 iterations) |",
        "| parallel zero-pattern scan, word compare of pattern keys, 256-case lane tasks | "
        "about 5 % on two threads |",
        "| general path: loops over the component columns of the basis reactions only (each "
        "holds its pivot with coefficient 1 and no other pivot), basis kept while its pivots are "
        "still the least abundant species, row operations on slices | workload (c) at 10 "
        "reactions: 399k -> 251k instructions per case |",
        "| lane kernel with run-time sizes for all-gas systems beyond the specialised ones (up to "
        "20 reactions) | workload (c) on one thread: 7 reactions 24-29 -> 5.0 us, 10 reactions "
        "32-45 -> 15 us, 20 reactions 140-170 -> 69 us per case |",
        "| output memory reused: freed result arrays of 4 MiB and more kept for the next "
        "solve (`eqbatch.release_memory()` returns them) | 1e7 cases: 0.41 -> 0.30-0.34 us per case "
        "(no page faults after the first calls) |",
        "| lane line search: the exact Gibbs test takes no logarithm (`ln(1 + d/n)` is the "
        "difference of the logarithms the trial point already has; some lane of eight needs the "
        "test in 70 % of iterations) | 4.67k -> 4.19k instructions |",
        "| one-case calls: a one-lane instance of the lane kernel (same bits), the general "
        "workspace made only when needed, the pattern table scanned before hashing, derivatives "
        "of one chunk on the calling thread; `system.prepare()` (options checked and outputs made "
        "once) | one case in the core 16.0k -> 12.4k instructions a call; a prepared call 3.1 us "
        "against 15.4 us for `solve()` |",
        "| species data in the core (issue 15): every data form as segments of one Cp family, "
        "folded to kelvin with the integrals' coefficients precomputed (one logarithm a case) | "
        "`system.lnK(T)` of 1e6 temperatures 2.3 s -> 0.02 s; `solve(T=...)` 0.27x -> 0.84x of "
        "`solve(lnK=...)` |",
        "| adiabatic solves: species h and cp from the core, only unbalanced cases re-solved, the "
        "range's ends solved only when a step needs them, dn/dT without the feed derivatives | "
        "20.7 -> 6.4 us a case (20,000 demo cases, same iterations) |",
        "| adiabatic solves in the core: one Newton iteration on the extents with the outlet "
        "temperature eliminated by the energy balance (merit: the entropy at the given enthalpy), "
        "compile-time sizes, the balance solved only as closely as the residuals need | 6.4 -> 0.74 us "
        "a case (7 Newton steps instead of 22; 0.054x -> 0.24x of the isothermal solve) |",
        "| approach solves: the direction each approached reaction runs taken from the feed where "
        "the stoichiometry fixes it (a linear programme per zero pattern), so no solve at T "
        "first; only the approached reactions' ln K evaluated again | 2.7 -> 1.6-1.8 isothermal solves |",
        "| sensitivities of a one-chunk call: the derivatives' working memory kept per thread | "
        "a prepared call with sensitivities 2.0x -> 1.9x the plain prepared call |",
        "| one-case calls: zero-pattern keys inline (no allocation for up to 128 species), output "
        "chunks cut lazily, the interpreter lock kept for calls under eight cases; a prepared call "
        "passes one float pressure and two output buffers (amounts and extents; masks, iterations "
        "and statuses) instead of five borrowed arrays, its Python step written in line | one case "
        "in the core 12.6k -> 10.5k instructions (1.38 -> 1.03 us); a prepared call 2.2 -> 1.5 us; "
        "its derivatives into one buffer made once, read from the two (3.4 -> 2.5 us) |",
        "| cubic equations of state: each species' constants folded once (`Cubic::new`: one square "
        "root a state instead of two and three divisions a species), the vapour-like root by Newton "
        "from Z = 1 + B (an upper bound: monotone convergence, no acos, cos or cbrt) | Peng-Robinson "
        "ammonia loop, 1e6 cases: 1.05 -> 0.85 s |",
        "| adiabatic solves: the feed's enthalpy summed in the core, outputs written into a freed "
        "output set, no second check of the balance in Python (the core closes it to 1e-13 of T) | "
        "1e6 cases 0.74 -> 0.60 s (0.24x -> 0.27x of the isothermal solve) |",
        "| approach solves: the sides of the approach temperatures from the reaction enthalpies of "
        "the one ln K evaluation at T (no separate d ln K / dT), one zero pattern found without an "
        "index | 1.84 -> 1.62 isothermal solves |",
        "",
        "Per-case time against the number of cases: best call of several, the sizes taking turns "
        "(five rounds). The outputs (69 bytes "
        "per case: amounts, extents, status, iterations; mole fractions are computed when first "
        "read) of the first calls of a size are fresh memory from the system, which this VM "
        "maps, zeroes and, after it is freed, hands back to its host within seconds (about 3 ms "
        "per MiB to map again, measured with numpy alone: more than the solve that writes it). "
        "Below 1e6 cases the allocator's heap keeps freed outputs; from 4 MiB up eqbatch keeps "
        "them itself (up to 1 GiB, for 30 s), so repeated large solves, as a Monte Carlo study "
        "or an optimiser runs them, also write into memory the process already holds. "
        "The first call's time is beside the best (at 1e7 the first two calls take fresh memory: "
        "the earlier result is still held while the next is solved).",
    ]
    report += [
        "",
        "### Throughput against the number of cases",
        "",
        "| engine | cases | cases/s | per case | first call, per case |",
        "|---|---:|---:|---:|---:|",
    ]
    for r in scaling:
        first = f"{1e6 * r.extra['first'] / r.n_cases:.3g} us" if "first" in r.extra else "-"
        report.append(f"| {r.engine} | {r.n_cases:,} | {r.rate:,.0f} | {r.per_case_us:.3g} us | {first} |")
    mib = 1024 * 1024
    report += [
        "",
        "### Peak memory",
        "",
        f"{memory['n']:,} cases of workload (a), in a fresh process: inputs {memory['inputs'] / mib:,.0f} MiB "
        f"and outputs {memory['outputs'] / mib:,.0f} MiB (amounts, extents, status, iterations; "
        f"mole fractions are computed on first read). Resident set before the solve (inputs, Python, "
        f"numpy, the library) {memory['rss_before'] / mib:,.0f} MiB; peak during the solve "
        f"{memory['peak'] / mib:,.0f} MiB: the solve added {(memory['peak'] - memory['rss_before']) / mib:,.0f} MiB "
        f"for {memory['outputs'] / mib:,.0f} MiB of outputs, "
        f"{(memory['peak'] - memory['rss_before'] - memory['outputs']) / mib:,.1f} MiB beyond them "
        f"(per-thread scratch, the zero-pattern table). Solved in {memory['seconds']:.2f} s, "
        f"{100 * memory['converged']:.2f} % converged.",
    ]
    report += [
        "",
        "### Parquet sweeps",
        "",
        "Workload (a) cases in a Parquet file: the in-memory solve (read the whole table, solve) against "
        "`eqbatch.sweep` (record batches of 65,536 rows, incremental writer, resumable parts), "
        "each in a fresh process; peak memory is the resident-set high-water mark above the process "
        "after import.",
        "",
        "| rows | in-memory rows/s | sweep rows/s | sweep / in-memory | sweep peak memory |",
        "|---:|---:|---:|---:|---:|",
    ]
    for e in sweeps:
        mem, sw = e["memory"], e["sweep"]
        report.append(
            f"| {e['n']:,} | {mem['rows'] / mem['seconds']:,.0f} | {sw['rows'] / sw['seconds']:,.0f} | "
            f"{(sw['rows'] / sw['seconds']) / (mem['rows'] / mem['seconds']):.0%} | "
            f"{sw['peak_over_base'] / 2**20:,.0f} MiB |"
        )
    if len(sweeps) >= 2:
        growth = (sweeps[-1]["sweep"]["peak_over_base"] - sweeps[0]["sweep"]["peak_over_base"]) / 2**20
        report += [
            "",
            f"Peak memory grew by {growth:,.1f} MiB from {sweeps[0]['n']:,} to {sweeps[-1]['n']:,} rows "
            f"(target: within 64 MiB).",
        ]
    report += [
        "",
        f"## Workload (b): five reactions, ln K over +-30, {problem_b.n_cases:,} cases",
        "",
        table(runs_b, runs_b[0]),
    ]
    report += [
        "",
        "## Workload (c): random networks (four elements, all species fed)",
        "",
        "| reactions | species | engine | per case | cases/s | converged | mean iterations |",
        "|---:|---:|---|---:|---:|---:|---:|",
    ]
    for r in network_runs:
        report.append(
            f"| {r.extra['reactions']} | {r.extra['reactions'] + 4} | {r.engine} | "
            f"{r.per_case_us:.3g} us | {r.rate:,.0f} | {100 * r.converged:.2f} % | {r.iterations:.2f} |"
        )
    png = out / "throughput.png"
    plot(png, scaling, network_runs)
    report += ["", f"![throughput]({png.name})", ""]
    (out / "RESULTS.md").write_text("\n".join(report) + "\n")
    (out / "results.json").write_text(
        json.dumps(
            {
                "machine": machine_info,
                "runs_a": [r.__dict__ for r in runs_a],
                "lean": duel,
                "single": single,
                "thermo": thermo,
                "condensed": condensed,
                "gases": gases,
                "memory": memory,
                "threads": {"one": one.seconds, "two": two.seconds},
            },
            indent=1,
            default=float,
        )
    )
    print("\n".join(report))
    return 0


if __name__ == "__main__":
    sys.exit(main())
