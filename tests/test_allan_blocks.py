"""The overlapping Allan deviation's block code paths against allantools (issue 18).

budget.stats.allan.oadev forms the second differences in blocks of ``BLOCK`` values and, for
averaging factors m ≥ BLOCK, by a second branch. With the shipped BLOCK = 65 536 the ordinary
tests (n ≤ 5000) never reach the second branch nor more than one block. Oracle: the
general-purpose ``allantools`` package (SP 1065 eq. 11, never imported by budget/).
"""

from __future__ import annotations

import allantools
import numpy as np
import pytest

from budget.stats import allan


def _oracle_oadev(y, m):
    taus, dev, _, _ = allantools.oadev(y, rate=1.0, data_type="freq",
                                       taus=np.asarray(m, dtype=float))
    assert np.array_equal(taus, np.asarray(m, dtype=float))
    return dev


@pytest.mark.parametrize("noise", ["white", "random-walk"])
def test_small_blocks_reach_every_branch(monkeypatch, noise):
    # BLOCK = 16, DOT = 5: several blocks, ragged last block and dot piece, and factors on both
    # sides of BLOCK (m = 16 is the first of the m ≥ BLOCK branch)
    monkeypatch.setattr(allan, "BLOCK", 16)
    monkeypatch.setattr(allan, "DOT", 5)
    rng = np.random.default_rng(18)
    y = rng.normal(size=1001)
    if noise == "random-walk":
        y = np.cumsum(y)
    m = [1, 2, 3, 7, 15, 16, 17, 40, 100, 333, 500]
    ours = allan.oadev(y, m).deviation
    # same formula, another order of summation: rounding-level agreement
    np.testing.assert_allclose(ours, _oracle_oadev(y, m), rtol=1e-9, atol=0)


def test_shipped_block_size_at_m_65536():
    # n = 140 000 > 2·65 536: the m ≥ BLOCK branch with the shipped constants
    rng = np.random.default_rng(65536)
    y = rng.normal(size=140_000)
    m = [1, 4096, 65_536, 69_000]
    ours = allan.oadev(y, m).deviation
    np.testing.assert_allclose(ours, _oracle_oadev(y, m), rtol=1e-9, atol=0)
