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


def test_speed_modes_split_set_points_despite_strays():
    # two drive set points 18 % apart, each trimmed +-4 % (uniform), and 1 window in 400 an estimate
    # that missed by a bin and landed between them: still two modes, each set point's windows
    # together (scikit-learn's adjusted Rand index against the truth, 1 for the same partition)
    rng = np.random.default_rng(5)
    a, b = 20.7 * rng.uniform(0.96, 1.04, 2000), 24.5 * rng.uniform(0.96, 1.04, 2000)
    stray = rng.uniform(21.6, 23.4, 10)
    x = np.concatenate([a, b, stray])
    k, lab = mf.speed_modes(x, 0.03, mf.MIN_MODE_N)
    assert k == 2
    truth = np.r_[np.zeros(2000), np.ones(2000)]
    assert adjusted_rand_score(truth, lab[:4000]) == 1.0
    # a continuum of speeds (a drive trimmed slowly across the range) stays one mode
    assert mf.speed_modes(rng.uniform(19.0, 26.0, 4000), 0.03, mf.MIN_MODE_N)[0] == 1


def test_mode_ranges_stop_short_of_the_search_range_ends():
    # a speed read at an end of the search range (19.5-29 Hz) is the range, not the shaft: no mode
    # may cover it, so the gateway leaves such windows unscored
    from firmware_py.detect.detector import default_params
    from firmware_py.dsp import feature_index as fi
    p = default_params(1, 1, 6680)
    p.update(fc_speed_lo_q8=int(19.5 * 256), fc_speed_hi_q8=29 * 256, det_bands=1)
    rng = np.random.default_rng(6)
    n = 400
    feats = np.zeros((n, fi.per_axis(1)), np.int64)
    feats[:, fi.F_RMS] = rng.integers(3000, 5000, n)
    feats[:, fi.F_VEL] = rng.integers(6000, 9000, n)
    feats[:, fi.F_BAND0] = rng.integers(900, 1100, n)
    sp = np.r_[rng.uniform(19.6, 21.0, n // 2), rng.uniform(27.5, 28.9, n // 2)]
    keys = mf.fit(feats, p, sp, 0.05)
    op = np.array(keys["det_op_speed_q8"]).reshape(-1, 2)
    lo, hi = mf.pinned_limits_q8(p)
    assert lo > p["fc_speed_lo_q8"] and hi < p["fc_speed_hi_q8"]
    assert op.min() >= lo and op.max() <= hi and len(op) == 2
