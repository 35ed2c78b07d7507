"""Shared geometry: masks, distances and the specular wall rule."""

from __future__ import annotations

import numpy as np
import pytest

from crossflock import geometry_from_config, load_config
from crossflock._geometry import grid_coords, grid_mask, inside, reflect, wall_distance
from tests.conftest import small_mapping


def _geom(**domain):
    return geometry_from_config(load_config(small_mapping(domain=domain)))


def test_periodic_box_is_all_fluid():
    g = _geom()
    assert g.periodic
    assert grid_mask(g, 32, 32).all()
    assert np.isinf(wall_distance(g, 3.0, 4.0))


def test_grid_is_cell_centred():
    g = _geom(size=[16.0, 8.0])
    x, y = grid_coords(g, 32, 8)
    assert x[0] == pytest.approx(0.25) and x[-1] == pytest.approx(16.0 - 0.25)
    assert y[0] == pytest.approx(0.5) and np.allclose(np.diff(y), 1.0)


def test_channel_wall_distance_and_mask():
    g = _geom(boundary="channel")
    assert g.channel and not g.periodic
    assert wall_distance(g, 1.0, 3.0) == pytest.approx(3.0)
    assert wall_distance(g, 1.0, 15.0) == pytest.approx(1.0)
    assert not inside(g, 1.0, -0.1) and inside(g, 1.0, 0.1)
    assert grid_mask(g, 32, 32).all()  # cell centres never sit on the walls


def test_obstacle_mask_area_and_periodic_image():
    g = _geom(obstacles=[{"center": [1.0, 8.0], "radius": 3.0}])
    # the disc wraps through x = 0: a point at x = 15.5 is 1.5 from the centre's image
    assert wall_distance(g, 15.5, 8.0) == pytest.approx(1.5 - 3.0)
    n = 256
    solid = 1.0 - grid_mask(g, n, n).mean()
    exact = np.pi * 9.0 / 256.0
    # midpoint-rule area error of a disc ~ perimeter * spacing / n cells (common practice)
    assert solid == pytest.approx(exact, abs=2 * np.pi * 3.0 * (16 / n) / 256.0)
    assert g.fluid_area() == pytest.approx(256.0 - np.pi * 9.0)


def test_channel_reflection_is_specular():
    g = _geom(boundary="channel")
    x, y, th = reflect(g, [5.0, 5.0], [-0.3, 16.2], [-0.5, 2.0])
    assert y == pytest.approx([0.3, 15.8])
    assert th == pytest.approx([0.5, -2.0])
    assert x == pytest.approx([5.0, 5.0])


def test_obstacle_reflection_mirrors_and_reverses_normal_component():
    g = _geom(obstacles=[{"center": [8.0, 8.0], "radius": 2.0}])
    # particle 0.5 inside the disc surface on the +x side, heading into it at 45 degrees
    x, y, th = reflect(g, [9.5], [8.0], [np.pi - np.pi / 4])
    assert x[0] == pytest.approx(10.5) and y[0] == pytest.approx(8.0)
    # normal is +x: the x component of the heading flips sign, the y component stays
    assert np.cos(th[0]) == pytest.approx(np.cos(np.pi / 4))
    assert np.sin(th[0]) == pytest.approx(np.sin(np.pi / 4))


def test_reflect_puts_every_particle_back_in_the_fluid():
    g = _geom(boundary="channel", obstacles=[{"center": [8.0, 8.0], "radius": 3.0}])
    rng = np.random.default_rng(0)
    # positions that a step of length < radius can produce: within 0.9 of the fluid
    x = rng.uniform(0, 16, 20000)
    y = rng.uniform(-0.9, 16.9, 20000)
    th = rng.uniform(-np.pi, np.pi, 20000)
    x2, y2, th2 = reflect(g, x, y, th)
    assert inside(g, x2, y2).all()
    assert (th2 > -np.pi).all() and (th2 <= np.pi).all()
    assert ((x2 >= 0) & (x2 < 16)).all()
