"""UMAP embeddings of the scaled chemistry: the clustering space and the 2-D map.

UMAP (McInnes, Healy and Melville 2018) builds a fuzzy graph of each lot's
nearest neighbours and lays it out in a few dimensions. The engine builds the
graph itself and hands the layout to umap-learn:

* nearest neighbours are exact (scikit-learn), not approximate: a few lots to a
  few hundred thousand lots in about ten dimensions are well inside what an
  exact search does quickly, and it spares umap-learn's approximate search and
  its long one-off compilation;
* the fuzzy graph follows umap-learn's ``fuzzy_simplicial_set`` (smooth kNN
  distances, exponential memberships, fuzzy union), vectorised with NumPy; a
  test checks it against umap-learn's own;
* the layout is umap-learn's: spectral initialisation
  (``umap.spectral.spectral_layout``) and its stochastic gradient descent
  (``umap.layouts.optimize_layout_euclidean``), seeded, single-threaded so that
  it is reproducible; the clustering space and the 2-D map, two independent
  layouts of the same graph, run side by side in two threads.

New lots are placed the way umap-learn's ``transform`` starts new points, as the
weighted mean of their neighbours' coordinates, and kept there (umap-learn then
refines the start; the engine does not, so a new lot stays inside the region
of its neighbours). The weights are the fuzzy memberships of the engine's own
graph (local connectivity 1, the graph's k); umap-learn's start uses local
connectivity 0, which weights the nearest neighbour a little less.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import scipy.sparse
from sklearn.neighbors import NearestNeighbors

SMOOTH_K_TOLERANCE = 1e-5
MIN_K_DIST_SCALE = 1e-3


@dataclass(frozen=True)
class Neighbours:
    """Nearest neighbours of each lot: indices and distances, nearest first."""

    indices: np.ndarray
    distances: np.ndarray


TREE_FROM_LOTS = 60_000  # a k-d tree above this many reference lots, whatever the dimension
TREE_UP_TO_DIMENSIONS = 8  # and at any size up to this many dimensions


class NeighbourIndex:
    """Exact nearest neighbours among fixed reference lots, built once and queried in batches.

    A k-d tree (scikit-learn) answers a query in about O(log m) distance
    evaluations for m reference lots in a few dimensions; a brute search costs
    O(m) but runs as matrix products. Measured on the demo chemistry (2 cores,
    15 neighbours): in the 8-D clustering space the tree took 0.67 s against
    2.9 s for 20,000 queries among 50,000 lots; in 13 scaled analytes brute
    force won at 20,000 lots (0.04 against 0.10 ms a query). So the tree is
    used up to :data:`TREE_UP_TO_DIMENSIONS` dimensions and above
    :data:`TREE_FROM_LOTS` lots, where brute force would grow with the model.
    Both are exact; the index is rebuilt from the stored coordinates
    (deterministic), never saved.

    Parameters
    ----------
    reference : ndarray, shape (m, d)
        The reference lots' coordinates.
    """

    def __init__(self, reference: np.ndarray) -> None:
        reference = np.asarray(reference)
        self.size = int(len(reference))
        dims = reference.shape[1] if reference.ndim == 2 else 1
        self.method = ("kd_tree" if self.size > TREE_FROM_LOTS or dims <= TREE_UP_TO_DIMENSIONS
                       else "brute")
        self._search = (NearestNeighbors(algorithm=self.method).fit(reference)
                        if self.size else None)

    def query(self, points: np.ndarray, k: int) -> Neighbours:
        """The ``k`` nearest reference lots of each point, nearest first.

        ``k`` is capped at the number of reference lots.
        """
        k = min(int(k), self.size)
        if self._search is None or not len(points) or k == 0:
            return Neighbours(indices=np.zeros((len(points), k), dtype=np.int64),
                              distances=np.zeros((len(points), k)))
        dist, idx = self._search.kneighbors(points, n_neighbors=k)
        return Neighbours(indices=idx, distances=dist)


def nearest(reference: np.ndarray, k: int, query: np.ndarray | None = None) -> Neighbours:
    """Exact k nearest neighbours (Euclidean) of ``query`` among ``reference``.

    With ``query`` None the reference lots themselves are queried, and each
    lot is its own first neighbour, as umap-learn expects (a brute search,
    which beats a tree for the fitting graph). New lots are searched through
    a :class:`NeighbourIndex`.
    """
    if query is not None:
        return NeighbourIndex(reference).query(query, k)
    k = min(k, len(reference))
    # brute force: matrix products in chunks beat the trees in ten or so dimensions
    # (measured: 28 s against 95 s for 100,000 lots, 10x for 6,000)
    search = NearestNeighbors(n_neighbors=k, algorithm="brute").fit(reference)
    dist, idx = search.kneighbors(reference)
    # a duplicate lot may come before the lot itself; put the lot first
    own = np.arange(len(reference))
    first_is_self = idx[:, 0] == own
    for i in np.flatnonzero(~first_is_self):
        where = np.flatnonzero(idx[i] == i)
        j = int(where[0]) if where.size else k - 1
        idx[i, 1 : j + 1] = idx[i, :j]
        dist[i, 1 : j + 1] = dist[i, :j]
        idx[i, 0], dist[i, 0] = i, 0.0
    dist[:, 0] = 0.0  # the distance products can leave a tiny non-zero self distance
    return Neighbours(indices=idx, distances=dist)


def smooth_knn_dist(distances: np.ndarray, k: float, n_iter: int = 64
                    ) -> tuple[np.ndarray, np.ndarray]:
    """UMAP's per-lot bandwidths: sigma with sum exp(-(d - rho) / sigma) = log2(k).

    Vectorised form of ``umap.umap_.smooth_knn_dist`` (local connectivity 1,
    bandwidth 1), bisection over all lots at once, float32 as umap-learn.

    Returns
    -------
    sigmas, rhos : ndarray of float32
    """
    distances = distances.astype(np.float32)
    n = distances.shape[0]
    target = np.float32(np.log2(k))
    positive = np.where(distances > 0, distances, np.inf)
    rho = np.min(positive, axis=1)
    rho = np.where(np.isfinite(rho), rho, 0.0).astype(np.float32)
    lo = np.zeros(n, dtype=np.float64)
    hi = np.full(n, np.inf)
    mid = np.ones(n, dtype=np.float64)
    active = np.ones(n, dtype=bool)
    shifted = (distances[:, 1:] - rho[:, None]).astype(np.float64)
    for _ in range(n_iter):
        with np.errstate(over="ignore", divide="ignore"):
            terms = np.where(shifted > 0, np.exp(-(shifted / mid[:, None])), 1.0)
        psum = terms.sum(axis=1).astype(np.float32)
        done = np.abs(psum - target) < SMOOTH_K_TOLERANCE
        active &= ~done
        if not active.any():
            break
        too_big = active & (psum > target)
        too_small = active & ~(psum > target)
        hi = np.where(too_big, mid, hi)
        new_mid = np.where(too_big, (lo + hi) / 2.0, mid)
        lo = np.where(too_small, mid, lo)
        grow = too_small & ~np.isfinite(hi)
        new_mid = np.where(grow, mid * 2, new_mid)
        new_mid = np.where(too_small & np.isfinite(hi), (lo + hi) / 2.0, new_mid)
        mid = new_mid
    sigma = mid.astype(np.float32)
    mean_ith = distances.mean(axis=1)
    floor = np.where(rho > 0, MIN_K_DIST_SCALE * mean_ith, MIN_K_DIST_SCALE * distances.mean())
    sigma = np.maximum(sigma, floor.astype(np.float32))
    return sigma, rho


def memberships(neighbours: Neighbours, sigmas: np.ndarray, rhos: np.ndarray,
                self_loops: bool = False) -> np.ndarray:
    """Fuzzy membership of each listed neighbour: exp(-(d - rho) / sigma), 1 within rho."""
    d = neighbours.distances.astype(np.float32)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        vals = np.exp(-((d - rhos[:, None]) / sigmas[:, None]))
    vals = np.where((d - rhos[:, None] <= 0) | (sigmas[:, None] == 0), 1.0, vals)
    if not self_loops:
        vals = np.where(neighbours.indices == np.arange(len(d))[:, None], 0.0, vals)
    return vals.astype(np.float32)


def fuzzy_graph(neighbours: Neighbours) -> scipy.sparse.coo_matrix:
    """UMAP's fuzzy simplicial set of the lots (fuzzy union of local memberships)."""
    n, k = neighbours.indices.shape
    sigmas, rhos = smooth_knn_dist(neighbours.distances, float(k))
    vals = memberships(neighbours, sigmas, rhos)
    rows = np.repeat(np.arange(n, dtype=np.int32), k)
    graph = scipy.sparse.coo_matrix(
        (vals.ravel(), (rows, neighbours.indices.ravel().astype(np.int32))), shape=(n, n)
    ).tocsr()
    graph.eliminate_zeros()
    transpose = graph.transpose()
    product = graph.multiply(transpose)
    union = graph + transpose - product
    union = union.tocoo()
    union.eliminate_zeros()
    return union


def default_epochs(n_lots: int) -> int:
    """``segment.epochs = "auto"``: 200 up to 2,000 lots, then 200 sqrt(2000 / n), at least 60.

    Each epoch visits every edge of the graph, so larger ranges get more updates
    per epoch; umap-learn itself drops from 500 to 200 epochs above 10,000 points.
    """
    if n_lots <= 2000:
        return 200
    return max(60, int(round(200 * (2000 / n_lots) ** 0.5)))


def _prepare_epoch_function() -> None:
    """Let umap-learn's SGD epoch release the GIL and cache its compiled code on disk.

    The two layouts (clustering space and map) then run side by side on two
    cores, and later processes load the compiled epoch instead of compiling it
    again. The function and its results are umap-learn's own; only the numba
    options change, and only before its first compilation.
    """
    try:
        from umap import layouts

        dispatcher = layouts._nb_optimize_layout_euclidean_single_epoch
        if not dispatcher.signatures:
            dispatcher.targetoptions["nogil"] = True
            dispatcher.enable_caching()
    except (ImportError, AttributeError, KeyError, TypeError, OSError):
        pass


def layouts(graph: scipy.sparse.coo_matrix, data: np.ndarray,
            jobs: list[tuple[int, int, float]], n_epochs: int) -> list[np.ndarray]:
    """Several seeded layouts of one graph, run side by side in threads.

    ``jobs`` holds ``(n_components, seed, min_dist)`` per layout; each layout is
    computed exactly as :func:`layout` would, so the results do not depend on
    the threads.
    """
    _prepare_epoch_function()
    if len(jobs) == 1:
        return [layout(graph, data, jobs[0][0], jobs[0][1], n_epochs, jobs[0][2])]
    from concurrent.futures import ThreadPoolExecutor

    # each layout silences umap-learn's warnings with catch_warnings, which swaps the
    # process-wide filter list and is not thread-safe; one outer context here restores
    # the caller's filters once both threads are done, so no "ignore" is left behind
    with warnings.catch_warnings(), ThreadPoolExecutor(max_workers=min(2, len(jobs))) as pool:
        futures = [pool.submit(layout, graph, data, dim, seed, n_epochs, min_dist)
                   for dim, seed, min_dist in jobs]
        return [f.result() for f in futures]


def layout(graph: scipy.sparse.coo_matrix, data: np.ndarray, n_components: int, seed: int,
           n_epochs: int, min_dist: float = 0.0) -> np.ndarray:
    """Lay the fuzzy graph out in ``n_components`` dimensions with umap-learn.

    Mirrors ``umap.umap_.simplicial_set_embedding`` for the Euclidean output
    with spectral initialisation, seeded.

    Returns
    -------
    ndarray of float32, shape (n_lots, n_components)
    """
    from umap.layouts import optimize_layout_euclidean
    from umap.spectral import spectral_layout
    from umap.umap_ import find_ab_params, make_epochs_per_sample, noisy_scale_coords

    random_state = np.random.RandomState(seed)
    graph = graph.tocoo(copy=True)
    graph.sum_duplicates()
    n = graph.shape[0]
    if graph.nnz == 0 or n < n_components + 2:
        return random_state.uniform(0, 10, size=(n, n_components)).astype(np.float32)
    graph.data[graph.data < graph.data.max() / float(n_epochs)] = 0.0
    graph.eliminate_zeros()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        init = spectral_layout(data, graph, n_components, random_state)
    init = noisy_scale_coords(init, random_state, max_coord=10, noise=0.0001)
    span = init.max(0) - init.min(0)
    span[span == 0] = 1.0
    embedding = (10.0 * (init - init.min(0)) / span).astype(np.float32, order="C")
    a, b = find_ab_params(1.0, min_dist)
    epochs_per_sample = make_epochs_per_sample(graph.data, n_epochs)
    rng_state = random_state.randint(np.iinfo(np.int32).min + 1, np.iinfo(np.int32).max - 1,
                                     3).astype(np.int64)
    embedding = optimize_layout_euclidean(
        embedding, embedding, graph.row, graph.col, n_epochs, n, epochs_per_sample, a, b,
        rng_state, 1.0, 1.0, 5.0, parallel=False, move_other=True,
    )
    return np.asarray(embedding, dtype=np.float32)


def interpolate(neighbours: Neighbours, coordinates: np.ndarray) -> np.ndarray:
    """Coordinates of new lots: membership-weighted mean of their neighbours' coordinates.

    ``neighbours`` are the new lots' nearest training lots (in the scaled
    chemistry); weights are the fuzzy memberships of the engine's graph
    computed for the new lots (see the module notes for how this differs from
    umap-learn's own start).
    """
    sigmas, rhos = smooth_knn_dist(neighbours.distances, float(neighbours.indices.shape[1]))
    weights = memberships(neighbours, sigmas, rhos, self_loops=True).astype(np.float64)
    weights /= np.maximum(weights.sum(axis=1, keepdims=True), 1e-12)
    return np.einsum("nk,nkd->nd", weights, coordinates[neighbours.indices]).astype(np.float32)
