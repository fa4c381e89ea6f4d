"""The engine's UMAP graph and new-lot placement against umap-learn itself."""

from __future__ import annotations

import numpy as np
import pytest

from vinstrata.segment import embed


@pytest.fixture(scope="module")
def blobs():
    from sklearn.datasets import make_blobs

    points, labels = make_blobs(600, n_features=6, centers=4, random_state=0)
    return points, labels


def test_fuzzy_graph_matches_umap_learn(blobs):
    from umap.umap_ import fuzzy_simplicial_set

    points, _ = blobs
    neighbours = embed.nearest(points, 15)
    ours = embed.fuzzy_graph(neighbours).tocsr()
    theirs, _, _ = fuzzy_simplicial_set(points, 15, np.random.RandomState(0), "euclidean",
                                        knn_indices=neighbours.indices,
                                        knn_dists=neighbours.distances)
    theirs = theirs.tocsr()
    assert ours.nnz == theirs.nnz
    assert np.allclose(ours.toarray(), theirs.toarray(), atol=1e-4)


def test_smooth_knn_dist_matches_umap_learn(blobs):
    from umap.umap_ import smooth_knn_dist

    points, _ = blobs
    neighbours = embed.nearest(points, 10)
    sigma, rho = embed.smooth_knn_dist(neighbours.distances, 10.0)
    sigma_ref, rho_ref = smooth_knn_dist(neighbours.distances.astype(np.float32), 10.0)
    assert np.allclose(rho, rho_ref)
    assert np.allclose(sigma, sigma_ref, rtol=1e-3)


def test_layout_is_seeded_and_separates_the_blobs(blobs):
    from sklearn.metrics import silhouette_score

    points, labels = blobs
    graph = embed.fuzzy_graph(embed.nearest(points, 15))
    first, map2d = embed.layouts(graph, points, [(5, 1, 0.0), (2, 2, 0.1)], 100)
    again = embed.layout(graph, points, 5, 1, 100)
    assert np.array_equal(first, again)  # threads do not change the result
    assert map2d.shape == (600, 2)
    assert silhouette_score(first, labels) > 0.5


def test_new_points_land_among_their_neighbours(blobs):
    points, labels = blobs
    graph = embed.fuzzy_graph(embed.nearest(points, 15))
    coords = embed.layout(graph, points, 2, 3, 100)
    query = points[:20] + 0.01
    placed = embed.interpolate(embed.nearest(points, 15, query=query), coords)
    centres = np.array([coords[labels == k].mean(axis=0) for k in range(4)])
    nearest_centre = np.argmin(((placed[:, None, :] - centres[None]) ** 2).sum(-1), axis=1)
    assert (nearest_centre == labels[:20]).mean() >= 0.95


@pytest.mark.parametrize("dims, lots", [(5, 3_000), (13, 3_000), (13, 61_000)])
def test_neighbour_index_finds_the_exact_neighbours(dims, lots):
    # reference: scipy's cKDTree, an independent exact search
    from scipy.spatial import cKDTree

    rng = np.random.default_rng(dims + lots)
    reference = rng.normal(size=(lots, dims))
    points = rng.normal(size=(400, dims))
    index = embed.NeighbourIndex(reference)
    expected = "kd_tree" if dims <= embed.TREE_UP_TO_DIMENSIONS or lots > embed.TREE_FROM_LOTS \
        else "brute"
    assert index.method == expected
    found = index.query(points, 7)
    dist, idx = cKDTree(reference).query(points, k=7)
    assert np.array_equal(found.indices, idx)
    assert np.allclose(found.distances, dist, atol=1e-9)
    # asking for more neighbours than there are lots gives them all
    assert embed.NeighbourIndex(reference[:4]).query(points, 7).indices.shape == (400, 4)
