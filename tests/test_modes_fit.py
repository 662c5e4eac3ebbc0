"""Host-side k-means and the choice of k, against scikit-learn."""
import numpy as np
import pytest
from sklearn.cluster import KMeans
from sklearn.datasets import make_blobs
from sklearn.metrics import adjusted_rand_score, silhouette_score

from host_tools.fit import modes_fit as mf


@pytest.fixture(autouse=True)
def _one_thread():
    # the reference fits too: OpenMP threads spin-wait badly on a busy 2-core machine
    from threadpoolctl import threadpool_limits
    with threadpool_limits(1):
        yield


def _datasets():
    rng = np.random.default_rng(7)
    blobs, _ = make_blobs(2500, centers=6, n_features=5, cluster_std=2.5, random_state=1)
    aniso = blobs @ rng.normal(size=(5, 5))
    uniform = rng.random((1200, 4))
    return {"overlapping blobs": blobs, "anisotropic": aniso, "uniform": uniform}


@pytest.mark.parametrize("name", ["overlapping blobs", "anisotropic", "uniform"])
@pytest.mark.parametrize("k", [2, 4, 8])
def test_inertia_within_one_percent_of_sklearn(name, k):
    # reference: sklearn.cluster.KMeans, k-means++ seeding, 10 starts
    x = _datasets()[name]
    _, _, ours = mf.kmeans(x, k, n_init=10, seed=k)
    ref = KMeans(k, init="k-means++", n_init=10, random_state=0).fit(x).inertia_
    assert ours <= ref * 1.01


@pytest.mark.parametrize("k", [2, 3, 5, 8])
def test_same_partition_on_well_separated_blobs(k):
    # reference: sklearn KMeans labels and the generating labels; adjusted Rand index 1 means
    # the same partition up to renaming
    x, truth = make_blobs(1200, centers=k, n_features=4, cluster_std=0.3, center_box=(-40, 40),
                          random_state=k)
    _, lab, _ = mf.kmeans(x, k, seed=1)
    sk = KMeans(k, init="k-means++", n_init=10, random_state=0).fit(x).labels_
    assert adjusted_rand_score(lab, sk) == 1.0
    assert adjusted_rand_score(lab, truth) == 1.0


def test_silhouette_matches_sklearn():
    # reference: sklearn.metrics.silhouette_score (Rousseeuw 1987), Euclidean
    x, _ = make_blobs(600, centers=4, n_features=3, cluster_std=2.0, random_state=5)
    lab = np.random.default_rng(0).integers(0, 4, len(x))
    for labels in (lab, mf.kmeans(x, 4)[1]):
        assert mf.silhouette(x, labels) == pytest.approx(silhouette_score(x, labels), rel=1e-9)


@pytest.mark.parametrize("k", [2, 3, 5])
def test_choose_k_finds_separated_modes(k):
    x, _ = make_blobs(900, centers=k, n_features=6, cluster_std=0.5, center_box=(-20, 20),
                      random_state=10 + k)
    assert mf.choose_k(x)[0] == k


def test_choose_k_keeps_one_mode_for_a_single_gaussian():
    # a single isotropic Gaussian has no substantial structure (silhouette well under 0.25 is
    # expected for it; Kaufman and Rousseeuw's reading, from memory)
    x = np.random.default_rng(3).normal(size=(800, 6))
    assert mf.choose_k(x)[0] == 1
