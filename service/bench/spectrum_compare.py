"""Side-by-side timing of our spectrum and scikit-learn's ``spectral_embedding``.

Run as ``python -m service.bench.spectrum_compare --n 100000``. Both compute the leading
eigenvectors of the same normalised operator: scikit-learn's ``norm_laplacian=True``
embedding is our ``alpha = 0`` diffusion map (Belkin & Niyogi 2003), up to the
``D^-1/2`` scaling of its vectors, so the spans are compared by subspace angles.
"""

from __future__ import annotations

import argparse
import time
import warnings

import scipy.linalg as sla
import scipy.sparse as sp
from sklearn.manifold import spectral_embedding

from service.bench.graphs import benchmark_graph
from service.geometry.diffusion import diffusion_map


def compare_with_sklearn(
    W: sp.csr_matrix, n_components: int, *, sklearn_solver: str = "arpack"
) -> dict[str, float | str]:
    """Time ``diffusion_map(alpha=0)`` and ``sklearn.manifold.spectral_embedding``.

    Parameters
    ----------
    W : scipy.sparse.csr_matrix of shape (n, n)
        Symmetric connected affinity.
    n_components : int
        Eigenvectors including the trivial one (sklearn's ``drop_first=False``).
    sklearn_solver : {"arpack", "lobpcg", "amg"}, default "arpack"
        scikit-learn's ``eigen_solver`` (``amg`` needs pyamg).

    Returns
    -------
    dict
        ``ours_s``, ``sklearn_s`` (wall seconds), ``ratio`` (sklearn / ours),
        ``ours_solver``, ``max_angle`` (largest principal angle between the two spans,
        radians) and ``ours_max_residual``. Also printed.
    """
    start = time.perf_counter()
    dm = diffusion_map(W, alpha=0.0, n_eigenpairs=n_components)
    ours = time.perf_counter() - start
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # lobpcg/amg convergence warnings are expected
        emb = spectral_embedding(
            W,
            n_components=n_components,
            eigen_solver=sklearn_solver,
            random_state=0,
            drop_first=False,
            norm_laplacian=True,
        )
    theirs = time.perf_counter() - start
    # sklearn returns D^-1/2 v; our psi = D^-1/2 v * const: both spans are D^-1/2 span(v).
    angle = float(sla.subspace_angles(dm.psi, emb).max())
    result: dict[str, float | str] = {
        "n": float(W.shape[0]),
        "ours_s": ours,
        "sklearn_s": theirs,
        "ratio": theirs / ours,
        "ours_solver": dm.solver,
        "max_angle": angle,
        "ours_max_residual": float(dm.residuals.max()),
    }
    print(
        f"n={W.shape[0]} ours {ours:.2f}s ({dm.solver}) sklearn[{sklearn_solver}] "
        f"{theirs:.2f}s ratio {theirs / ours:.2f} max angle {angle:.1e}"
    )
    return result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--n", type=int, default=10_000)
    parser.add_argument("--components", type=int, default=41)
    parser.add_argument("--sklearn-solver", default="arpack")
    args = parser.parse_args()
    W = benchmark_graph(args.n)
    compare_with_sklearn(W, args.components, sklearn_solver=args.sklearn_solver)


if __name__ == "__main__":
    main()
