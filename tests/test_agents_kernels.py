"""Cell-list kernels against a brute-force O(N^2) numpy reference."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from test_agents_common import brute_sums

from crossflock import InputError
from crossflock.agents import (
    neighbour_counts,
    neighbour_mean_heading,
    neighbour_sums,
    polar_order,
    wrap_angle,
)
from crossflock.agents._kernels import CellGrid

# (box, radius, channel): fewer than three cells per side (1 and 2 cells, full-shell
# scan with deduplicated cells), radius equal to the box side, non-square boxes,
# channels (no wrap in y, any number of rows), and large boxes (half-shell scheme,
# odd and even numbers of periodic rows).
CASES = [
    ((2.5, 2.5), 1.0, False),   # 2 x 2 cells
    ((1.5, 5.0), 1.0, False),   # 1 x 5 cells
    ((5.0, 1.7), 1.0, False),   # 5 x 1 cells
    ((3.0, 3.0), 3.0, False),   # radius = box side, one cell
    ((4.0, 2.0), 2.0, False),   # radius = smaller side
    ((3.5, 3.5), 1.0, False),   # 3 x 3 cells: smallest half-shell grid
    ((10.0, 7.0), 1.0, False),  # half shell, odd number of rows
    ((9.0, 6.0), 1.3, False),   # half shell, non-square cells, even rows
    ((7.0, 3.2), 1.3, True),    # channel, 2 rows
    ((6.0, 1.2), 1.0, True),    # channel, 1 row
    ((2.9, 6.0), 1.0, True),    # channel, 2 columns (full shell)
    ((9.0, 9.0), 1.0, True),    # channel, half shell
]


def _random_state(box, n, seed, channel):
    rng = np.random.default_rng(seed)
    x = rng.random(n) * box[0]
    y = rng.random(n) * box[1]
    if channel:
        y = np.clip(y, 1e-9, box[1] * (1 - 1e-9))
    theta = rng.uniform(-np.pi, np.pi, n)
    return x, y, theta


@pytest.mark.parametrize(("box", "radius", "channel"), CASES)
def test_neighbour_sums_match_brute_force(box, radius, channel):
    x, y, theta = _random_state(box, 250, 7, channel)
    sx, sy, count = neighbour_sums(x, y, theta, box, radius, channel)
    bx, by, bn = brute_sums(x, y, theta, box, radius, channel)
    # Same terms summed in another order: round-off only, <= N eps per sum.
    tol = 250 * np.finfo(float).eps * 4
    np.testing.assert_allclose(sx, bx, rtol=0, atol=tol)
    np.testing.assert_allclose(sy, by, rtol=0, atol=tol)
    np.testing.assert_array_equal(count, bn)


def test_cases_cover_both_schemes():
    schemes = {CellGrid(*box, radius, channel, 1).half_shell for box, radius, channel in CASES}
    assert schemes == {True, False}


@settings(max_examples=40, deadline=None)
@given(
    lx=st.floats(0.6, 12.0), ly=st.floats(0.6, 12.0), frac=st.floats(0.05, 1.0),
    n=st.integers(1, 120), channel=st.booleans(), seed=st.integers(0, 2**32 - 1),
)
def test_neighbour_counts_property(lx, ly, frac, n, channel, seed):
    radius = frac * min(lx, ly)
    x, y, theta = _random_state((lx, ly), n, seed, channel)
    count = neighbour_counts(x, y, (lx, ly), radius, channel)
    np.testing.assert_array_equal(count, brute_sums(x, y, theta, (lx, ly), radius,
                                                    channel)[2])
    assert np.all(count >= 1)  # itself


def test_radius_covering_the_box_counts_every_particle_once():
    # Minimum-image distances in a periodic L x L box are at most L / sqrt(2) < L.
    x, y, theta = _random_state((3.0, 3.0), 40, 3, False)
    np.testing.assert_array_equal(neighbour_counts(x, y, (3.0, 3.0), 3.0), 40)
    mean = neighbour_mean_heading(x, y, theta, (3.0, 3.0), 3.0)
    expected = np.arctan2(np.sin(theta).sum(), np.cos(theta).sum())
    np.testing.assert_allclose(mean, expected, rtol=0, atol=1e-13)


def test_isolated_particle_keeps_its_heading():
    x = np.array([0.5, 5.0])
    y = np.array([0.5, 5.0])
    theta = np.array([2.0, -3.0])
    np.testing.assert_allclose(neighbour_mean_heading(x, y, theta, (10.0, 10.0), 1.0),
                               theta, rtol=0, atol=1e-15)


def test_periodic_images_are_neighbours_only_without_walls():
    # Two particles 0.4 apart across the y = 0 seam.
    x = np.array([1.0, 1.0])
    y = np.array([0.2, 4.8])
    assert list(neighbour_counts(x, y, (5.0, 5.0), 1.0, channel=False)) == [2, 2]
    assert list(neighbour_counts(x, y, (5.0, 5.0), 1.0, channel=True)) == [1, 1]


def test_wrap_angle_range_and_values():
    a = np.array([np.pi, -np.pi, 3 * np.pi, -3 * np.pi + 1e-3, 7.0, -7.0, 0.0, 1e3])
    w = wrap_angle(a)
    assert np.all(w > -np.pi) and np.all(w <= np.pi)
    np.testing.assert_allclose(np.exp(1j * w), np.exp(1j * a), rtol=0, atol=1e-12)
    assert w[0] == np.pi and w[1] == np.pi


def test_polar_order_limits():
    # Sums of 1000 terms: round-off bound about N eps.
    tol = 1000 * np.finfo(float).eps
    assert polar_order(np.full(1000, 0.7)) == pytest.approx(1.0, abs=tol)
    theta = np.linspace(-np.pi, np.pi, 1000, endpoint=False)
    assert polar_order(theta) < tol
    rng = np.random.default_rng(1)
    t = rng.uniform(-np.pi, np.pi, 777)
    assert polar_order(t) == pytest.approx(np.abs(np.exp(1j * t).mean()), abs=tol)


def test_wrapper_input_errors():
    x = np.array([0.5, 1.0])
    with pytest.raises(InputError, match="radius must be in"):
        neighbour_sums(x, x, x, (2.0, 2.0), 3.0)
    with pytest.raises(InputError, match="one length"):
        neighbour_sums(x, x[:1], x, (2.0, 2.0), 1.0)
    with pytest.raises(InputError, match="positions must lie"):
        neighbour_sums(x + 5.0, x, x, (2.0, 2.0), 1.0)
    with pytest.raises(InputError, match="non-empty"):
        polar_order(np.array([]))
