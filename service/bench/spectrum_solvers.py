"""Measure the eigen-solvers of :mod:`service.geometry.spectrum` side by side.

Run as ``python -m service.bench.spectrum_solvers --n 10000 30000 --out bench-results``.
Every (size, solver) pair runs in its own process with a time limit, so a solver that
does not converge cannot stall the table. Each row gives wall and CPU seconds, the largest
residual ``||A v - lambda v||``, ``1 - lambda_40`` and the largest principal angle between
its eigenspace and the first successful solver's (``scipy.linalg.subspace_angles``, the
only meaningful comparison when eigenvalues cluster).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp

from service.bench.graphs import benchmark_graph

SOLVER_NAMES = ("chebyshev", "shift-invert", "arpack", "lobpcg")


def _run_one(graph_path: Path, solver: str, out: Path, tau: float) -> None:
    from service.geometry.diffusion import diffusion_map

    W = sp.load_npz(graph_path).tocsr()
    wall, cpu = time.perf_counter(), time.process_time()
    dm = diffusion_map(W, solver=solver, tau=tau)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    vectors = dm.psi * np.sqrt(dm.pi)[:, None]
    np.savez(out, eigenvalues=dm.eigenvalues, vectors=vectors, residuals=dm.residuals)
    info = {"wall_s": wall, "cpu_s": cpu, "solver_used": dm.solver}
    out.with_suffix(".json").write_text(json.dumps(info))


def measure(
    sizes: list[int], solvers: list[str], out_dir: Path, timeout: float, tau: float = 0.0
) -> list[dict[str, object]]:
    """Run every solver on the benchmark graph of every size; return and print the rows."""
    out_dir.mkdir(parents=True, exist_ok=True)
    rows: list[dict[str, object]] = []
    for n in sizes:
        graph_path = out_dir / f"graph_{n}.npz"
        if not graph_path.exists():
            sp.save_npz(graph_path, benchmark_graph(n))
        reference: np.ndarray | None = None
        for solver in solvers:
            result = out_dir / f"run_{n}_{solver}_{tau:g}.npz"
            cmd = [
                sys.executable,
                "-m",
                "service.bench.spectrum_solvers",
                "--one",
                str(graph_path),
                solver,
                str(result),
            ]
            cmd += ["--tau", str(tau)]
            row: dict[str, object] = {"n": n, "solver": solver, "tau": tau}
            try:
                subprocess.run(cmd, check=True, timeout=timeout, capture_output=True)
            except subprocess.TimeoutExpired:
                row["status"] = f"timeout > {timeout:.0f}s"
            except subprocess.CalledProcessError as exc:
                row["status"] = "failed: " + exc.stderr.decode()[-200:]
            else:
                data = np.load(result)
                info = json.loads(result.with_suffix(".json").read_text())
                vectors = data["vectors"]
                lam = data["eigenvalues"]
                row |= info
                row["max_residual"] = float(data["residuals"].max())
                row["one_minus_lambda_last"] = float(1 - lam[-1])
                if reference is None:
                    reference = vectors
                row["angle_top20"] = float(
                    sla.subspace_angles(reference[:, 1:21], vectors[:, 1:21]).max()
                )
                row["angle_all"] = float(sla.subspace_angles(reference, vectors).max())
                row["status"] = "ok"
            rows.append(row)
            print(json.dumps(row), flush=True)
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--n", type=int, nargs="+", default=[10_000])
    parser.add_argument("--solvers", nargs="+", default=list(SOLVER_NAMES))
    parser.add_argument("--out", type=Path, default=Path("bench-results"))
    parser.add_argument("--timeout", type=float, default=600.0)
    parser.add_argument("--tau", type=float, default=0.0)
    parser.add_argument("--one", nargs=3, metavar=("GRAPH", "SOLVER", "OUT"))
    args = parser.parse_args()
    if args.one:
        _run_one(Path(args.one[0]), args.one[1], Path(args.one[2]), args.tau)
        return
    measure(args.n, args.solvers, args.out, args.timeout, args.tau)


if __name__ == "__main__":
    main()
