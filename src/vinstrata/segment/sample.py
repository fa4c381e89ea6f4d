"""The fitted sample of a large range: seeded, stratified by chemistry.

Above ``segment.fit_sample`` lots, the styles are fitted on a sample and every
other lot is placed against them as a new lot would be
(:mod:`vinstrata.segment.reference`). UMAP's neighbour graph and HDBSCAN's tree
grow faster than the lots; a sample of some tens of thousands of lots holds every
style a range of a million shows, if the small ones are not thinned out by chance. A
plain random sample would leave a style of a few hundred lots in a million with
a handful, below HDBSCAN's cluster sizes, so the sample is stratified:

1. the lots' transformed and scaled chemistry (missing cells at the centre, 0)
   is cut into :data:`CELLS` cells by k-means (scikit-learn's
   ``MiniBatchKMeans``, seeded, fitted on a seeded subset of at most
   :data:`KMEANS_LOTS` lots, one thread so the cells do not depend on the machine);
2. each cell gives at least ``floor`` lots (all of its lots when it holds fewer),
   ``floor`` being half the sample shared equally over the cells: at the default
   25,000 lots and 100 cells, 125 lots, the smallest HDBSCAN cluster size the
   default sweep tries (0.5 % of the sample), so a compact style that fills one
   cell can still be found;
3. the rest of the sample is shared over the cells in proportion to their
   sizes (largest remainders, ties to the lower cell number);
4. inside a cell the lots are drawn at random without replacement (seeded).

Grades play no part: styles are formed from chemistry alone.
"""

from __future__ import annotations

import numpy as np

CELLS = 100  # k-means cells the sample is stratified over
KMEANS_LOTS = 200_000  # the cells are learnt on a seeded subset of at most this many lots


def chemistry_cells(points: np.ndarray, seed: int, cells: int = CELLS) -> np.ndarray:
    """The k-means cell of each lot (seeded; missing cells should be filled beforehand).

    Parameters
    ----------
    points : ndarray, shape (n, d)
        Scaled chemistry without NaN.
    seed : int
    cells : int

    Returns
    -------
    ndarray of int, shape (n,)
    """
    from sklearn.cluster import MiniBatchKMeans
    from threadpoolctl import threadpool_limits

    n = len(points)
    cells = max(1, min(cells, n))
    rng = np.random.default_rng(seed)
    learn = np.sort(rng.choice(n, size=min(n, KMEANS_LOTS), replace=False))
    with threadpool_limits(1):
        kmeans = MiniBatchKMeans(n_clusters=cells, random_state=seed, n_init=3,
                                 batch_size=4096).fit(points[learn])
        return np.asarray(kmeans.predict(points), dtype=np.int64)


def allocate(sizes: np.ndarray, total: int) -> np.ndarray:
    """Lots drawn from each cell: a floor each, the rest in proportion to the cells' sizes.

    Parameters
    ----------
    sizes : ndarray of int
        Lots in each cell.
    total : int
        Sample size (at most ``sizes.sum()``).

    Returns
    -------
    ndarray of int
        At most ``sizes`` per cell, summing to ``total``.
    """
    sizes = np.asarray(sizes, dtype=np.int64)
    total = int(min(total, sizes.sum()))
    floor = total // (2 * max(int((sizes > 0).sum()), 1))
    take = np.minimum(sizes, floor)
    left = total - int(take.sum())
    while left > 0:
        room = sizes - take
        if not room.any():
            break
        share = left * room / room.sum()
        whole = np.minimum(np.floor(share).astype(np.int64), room)
        if whole.sum() == 0:  # largest remainders, ties to the lower cell
            order = np.lexsort((np.arange(len(room)), -(share - whole)))
            order = order[room[order] > 0][:left]
            whole = np.zeros_like(take)
            whole[order] = 1
        take += whole
        left -= int(whole.sum())
    return take


def stratified_sample(points: np.ndarray, size: int, seed: int) -> np.ndarray:
    """The fitted sample: row indices of ``size`` lots, stratified by chemistry cells, sorted.

    Parameters
    ----------
    points : ndarray, shape (n, d)
        Scaled chemistry without NaN.
    size : int
        ``segment.fit_sample``; all rows are returned when ``n <= size``.
    seed : int

    Returns
    -------
    ndarray of int
        Sorted row indices (file order).
    """
    n = len(points)
    if n <= size:
        return np.arange(n)
    cell = chemistry_cells(points, seed)
    sizes = np.bincount(cell, minlength=int(cell.max()) + 1)
    take = allocate(sizes, size)
    rng = np.random.default_rng([seed, 1])
    picked = [rng.choice(np.flatnonzero(cell == c), size=int(t), replace=False)
              for c, t in enumerate(take) if t > 0]
    return np.sort(np.concatenate(picked))
