"""Finite-difference engine: temporal blocking, bands, guard statistics, state layout.

The blocked kernel must be an exact re-ordering of single steps: every check here is
bit-for-bit (``assert_array_equal``) unless it compares two different formulas.
"""

import json

import numba
import numpy as np
import pytest

import crossflock as cf
from crossflock.continuum import FiniteDifferenceSolver, _fd, _fd_kernels
from crossflock.continuum._guard import check_state, failure_cause, field_stats

FULL = {"alpha": 1.0, "alpha_rho": 0.5, "beta": 1.0, "pressure": [0.5, 0.1, 0.02],
        "D_T": 0.5, "D_B": 0.2, "D_2": 0.05, "lambda1": 0.4, "lambda2": 0.2,
        "lambda3": -0.1, "D_rho": 0.1, "noise_strength": 0.01}
MINIMAL = {"alpha": 1.0, "beta": 1.0, "pressure": [0.5], "D_T": 0.3}
DISC = [{"center": [7.0, 9.0], "radius": 3.0}]


def _cfg(domain=None, coefficients=None, **continuum):
    return cf.load_config({
        "domain": {"size": [16.0, 20.0], **(domain or {})},
        "model": {"density": 2.0, "noise": 0.3},
        "run": {"duration": 2.0, "sample_every": 1.0, "initial": "ordered", "seed": 11},
        "continuum": {"grid": [16, 20], "dt": 0.01, "method": "finite_difference",
                      "initial_noise": 0.2,
                      "coefficients": FULL if coefficients is None else coefficients,
                      **continuum},
    })


CASES = {
    "periodic-full": _cfg(),
    "periodic-minimal": _cfg(coefficients=MINIMAL),
    "channel-full": _cfg({"boundary": "channel"}),
    "disc-full": _cfg({"obstacles": DISC}),
    "channel-disc-kinetic": _cfg({"boundary": "channel", "obstacles": DISC},
                                 coefficients="kinetic", kinetic_noise="auto",
                                 realizability=False),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_blocked_advance_equals_single_steps(name):
    cfg = CASES[name]
    stepped = FiniteDifferenceSolver(cfg)
    for _ in range(23):
        stepped.step()
    blocked = FiniteDifferenceSolver(cfg)
    blocked.advance(5)   # includes the first (Euler) step
    blocked.advance(18)  # several blocks, the last one partial
    assert blocked.n_steps == stepped.n_steps == 23
    np.testing.assert_array_equal(blocked._u, stepped._u)
    np.testing.assert_array_equal(blocked._h, stepped._h)
    assert blocked.rng.bit_generator.state == stepped.rng.bit_generator.state


@pytest.mark.parametrize("channel", [False, True])
def test_kernel_result_independent_of_bands_chunks_and_serial_or_parallel(channel):
    # the tiles compute every row of every step once, with the same arithmetic, so any
    # band split (and the thread count that picks it) and any number of rows per wavefront
    # sweep gives the same numbers
    rng = np.random.default_rng(9)
    ny, nx, k = 56, 20, 4
    fluid = np.ones((ny, nx), np.uint8)
    fluid[8:12, 5:9] = 0
    fl = _fd.padded_fluid(fluid, channel)
    u = (1.0 + 0.1 * rng.standard_normal((3, ny, nx))) * fluid
    h = rng.standard_normal((3, ny, nx)) * fluid
    noise = rng.standard_normal((k, 2, ny, nx))
    cs = rng.uniform(0.1, 1.0, 12)
    kin = rng.uniform(0.1, 1.0, 9)
    outs = []
    serial, parallel = _fd_kernels.fd_advance_kernel_serial, _fd_kernels.fd_advance_kernel
    for kernel, nb, chunk in ((serial, 1, 1), (parallel, 1, 4), (parallel, 2, 2),
                              (parallel, 3, 4), (serial, 7, 3), (serial, 1, 9)):
        u_out, h_out = np.zeros_like(u), np.zeros_like(h)
        ring, hring, edge, stats = _fd.scratch(nb, k, nx, chunk)
        kernel(u, h, u_out, h_out, fl, _fd.plain_rows(fl), channel, _fd.band_starts(ny, nb),
               k, _fd.scheme_table(k, False, 0.01), cs, kin, 1, 0.0,
               np.array([0.5, 0.1, 0.02]), np.array([0.5, 0.5, 0.01, 0.1]), noise, ring,
               hring, edge, stats)
        outs.append((u_out, h_out, (stats[:, 0].all(), stats[:, 1].min(),
                                    stats[:, 2].max())))
    for u_out, h_out, st in outs[1:]:
        np.testing.assert_array_equal(u_out, outs[0][0])
        np.testing.assert_array_equal(h_out, outs[0][1])
        assert st == outs[0][2]
    # the kernel's guard statistics are those of the state it wrote
    assert outs[0][2] == field_stats(*outs[0][0])
    assert not outs[0][0][:, fluid == 0].any()  # solids stay 0


@pytest.mark.parametrize("kernel", ["fd_advance_kernel_serial", "fd_advance_kernel"])
def test_bands_shorter_than_two_blocks_are_refused(kernel):
    # a trapezoid keeps its edge rows up to step K - 1, so it needs 2 K rows
    ny, nx, k = 12, 8, 4
    u = np.ones((3, ny, nx))
    u[1:] = 0.5
    fl = _fd.padded_fluid(np.ones((ny, nx), np.uint8), False)
    ring, hring, edge, stats = _fd.scratch(2, k, nx)
    # the argument types of the band test above (no extra compilation)
    args = (u, u * 0, np.zeros_like(u), np.zeros_like(u), fl, _fd.plain_rows(fl), False,
            _fd.band_starts(ny, 2), k, _fd.scheme_table(k, True, 0.01), np.full(12, 0.5),
            np.full(9, 0.5), 1, 0.0, np.array([0.5, 0.1]), np.array([1.0, 1.0, 0.01, 0.0]),
            np.zeros((k, 2, ny, nx)), ring, hring, edge, stats)
    with pytest.raises(ValueError, match="at least 2 \\* nsteps rows"):
        getattr(_fd_kernels, kernel)(*args)
    # 3 steps fit bands of 6 rows
    getattr(_fd_kernels, kernel)(*args[:8], 3, *args[9:])
    np.testing.assert_array_equal(args[2][0], 1.0)  # no divergence: rho stays 1
    assert np.ptp(args[2][1:]) == 0.0 and args[2][1, 0, 0] != 0.5  # w uniform, relaxing


def test_plain_rows_and_padded_mask():
    fluid = np.ones((6, 5), np.uint8)
    fluid[3, 2] = 0
    for channel, plain in ((False, [1, 1, 0, 0, 0, 1]), (True, [0, 1, 0, 0, 0, 0])):
        fl = _fd.padded_fluid(fluid, channel)
        assert fl.shape == (8, 7)
        np.testing.assert_array_equal(_fd.plain_rows(fl), plain)
    fl = _fd.padded_fluid(fluid, False)
    np.testing.assert_array_equal(fl[0, 1:-1], fluid[-1])  # periodic rows wrap
    np.testing.assert_array_equal(fl[4, 1:-1], fluid[3])
    assert fl[4, 0] == fluid[3, -1] and fl[4, -1] == fluid[3, 0]


def test_homogeneous_fixed_point_stays_exactly_steady():
    # the homogeneous ordered state |w|^2 = alpha / beta (GUIDE section 3: the
    # alignment term vanishes, every gradient is 0) is a fixed point of the equations;
    # the increment form keeps it bit for bit, so the rounded 4/3 and 1/3 cause no drift
    coeffs = {"alpha": 1.0, "beta": 0.25, "pressure": [0.5], "D_T": 0.3}
    cfg = _cfg(coefficients=coeffs)
    ny, nx = 20, 16
    s = FiniteDifferenceSolver(cfg, initial=(np.full((ny, nx), 2.0), np.full((ny, nx), 2.0),
                                             np.zeros((ny, nx))))
    s.advance(300)
    rho, wx, wy = s.fields()
    assert (rho == 2.0).all() and (wx == 2.0).all() and (wy == 0.0).all()


def test_resume_from_the_previous_state_layout():
    # checkpoints written before the history form held (u, u_prev, n_prev); loading one
    # converts h = -u_prev - 2 dt n_prev and continues the same SBDF2 steps
    cfg = _cfg({"boundary": "channel"}, coefficients=dict(FULL, noise_strength=0.0))
    ref = FiniteDifferenceSolver(cfg)
    u0 = np.stack(ref.fields())
    n0 = ref.rhs()
    ref.advance(1)
    u1 = np.stack(ref.fields())
    ref.advance(10)
    old = FiniteDifferenceSolver(cfg)
    old.set_state({"u": u1, "u_prev": u0, "n_prev": n0, "first": np.array(0),
                   "n_steps": 1, "rng": json.dumps(
                       old.rng.bit_generator.state)})
    old.advance(10)
    np.testing.assert_allclose(np.stack(old.fields()), np.stack(ref.fields()),
                               rtol=1e-13, atol=1e-13)


def test_guard_statistics_from_the_kernel_match_the_fields():
    cfg = _cfg({"obstacles": DISC})
    s = FiniteDifferenceSolver(cfg)
    s.advance(7)
    assert s.health(2.0, 100.0) is None
    rho, wx, wy = s.fields()
    assert s._stats[1] == field_stats(rho, wx, wy)
    assert failure_cause(*s._stats[1], 2.0, 0.1).startswith("|w| =")
    assert check_state(rho, wx, wy, 2.0, 0.1) == failure_cause(*s._stats[1], 2.0, 0.1)


def test_field_stats_against_numpy():
    rng = np.random.default_rng(2)
    rho, wx, wy = rng.normal(0.5, 1.0, (3, 9, 7))
    finite, rmin, w2max = field_stats(rho, wx, wy)
    assert finite and rmin == rho.min() and w2max == np.max(wx * wx + wy * wy)
    wy[4, 3] = np.inf
    assert field_stats(rho, wx, wy)[0] is False
    rho[2, 2] = np.nan
    assert check_state(rho, wx, wy, 1.0, 10.0) == "NaN or Inf in the fields"
    rho[2, 2] = -0.5
    wy[4, 3] = 0.0
    assert check_state(rho, wx, wy, 1.0, 1e9).startswith("negative density")


def test_last_good_state_survives_later_blocks_without_copies():
    cfg = _cfg(coefficients=MINIMAL)
    s = FiniteDifferenceSolver(cfg)
    s.advance(3)
    s.keep_good()
    kept = np.stack(s.fields())
    for _ in range(4):  # more blocks: they must not write into the kept buffers
        s.advance(9)
    t, fields = s.last_good()
    assert t == pytest.approx(3 * s.dt)
    np.testing.assert_array_equal(np.stack(fields), kept)


def test_minimal_variant_only_for_the_minimal_equations():
    cs = np.zeros(12)
    assert _fd.extra_terms(cs, [0.5], False) == (None, 0.5, pytest.approx([0.5]))
    assert _fd.extra_terms(cs, [], False)[:2] == (None, 0.0)
    assert _fd.extra_terms(cs, [0.5, 0.1], False)[0] == 1  # non-linear pressure
    assert _fd.extra_terms(cs, [0.5], True)[0] == 1  # kinetic: lambda terms
    for i in (4, 5, 6, 7, 8, 9):  # lambda1-3, D_B, D_2, D_rho
        one = cs.copy()
        one[i] = 0.1
        assert _fd.extra_terms(one, [0.5], False)[0] == 1


def test_minimal_variant_computes_what_the_general_one_does():
    # the minimal variant compiles the absent terms out; with those coefficients zero
    # the general variant must give the same step
    cfg = _cfg({"boundary": "channel", "obstacles": DISC}, coefficients=MINIMAL)
    s = FiniteDifferenceSolver(cfg)
    assert s._terms[0] is None
    s.advance(2)
    u, h = s._u.copy(), s._h.copy()
    outs = []
    for extra in (None, 1):
        u_out, h_out = np.zeros_like(u), np.zeros_like(h)
        ring, hring, edge, stats = _fd.scratch(1, 3, s.nx)
        _fd_kernels.fd_advance_kernel_serial(
            u, h, u_out, h_out, s._fl, s._plain, True, _fd.band_starts(s.ny, 1), 3,
            _fd.scheme_table(3, False, s.dt), s.coef.scalars, None, extra, s._terms[1],
            s._terms[2], s._par, None, ring, hring, edge, stats)
        outs.append((u_out, h_out))
    np.testing.assert_allclose(outs[0][0], outs[1][0], rtol=1e-15, atol=1e-15)
    np.testing.assert_allclose(outs[0][1], outs[1][1], rtol=1e-15, atol=1e-15)


def test_block_length_fits_the_cache_budget():
    assert _fd.block_steps(16, 4096) == _fd.BLOCK_MAX
    assert _fd.block_steps(100_000, 4096) == _fd.BLOCK_MIN
    assert _fd.block_steps(512, 16) == _fd.BLOCK_MIN  # bands of 2 K rows bounded by the rows
    for nx in (256, 512, 1024, 2048, 4096):
        for ny in (16, 64, 128, 512, 4096):
            k = _fd.block_steps(nx, ny)
            assert _fd.BLOCK_MIN <= k <= _fd.BLOCK_MAX
            ring, hring, _, _ = _fd.scratch(1, k, nx)
            nbytes = ring.nbytes + hring.nbytes
            assert _fd.scratch_bytes(k, nx) == nbytes
            assert k == _fd.BLOCK_MIN or (nbytes <= _fd.SCRATCH_BYTES
                                          and k * _fd.BAND_SHARE <= ny)
            # the largest block within both limits
            assert (k == _fd.BLOCK_MAX or (k + 1) * _fd.BAND_SHARE > ny
                    or _fd.scratch_bytes(k + 1, nx) > _fd.SCRATCH_BYTES)
    for nx in (254, 256, 500, 510, 512, 1000, 1024, 2040):
        stride = _fd.row_stride(nx)
        nbytes = stride * 8
        assert stride >= nx + 2 and stride % 8 == 0
        assert min(nbytes % 4096, -nbytes % 4096) >= _fd.PAGE_GAP
        # the shortest such row: one 64-byte step shorter would be too short or too
        # close to a page multiple
        shorter = nbytes - 64
        assert (shorter < 8 * (nx + 2)
                or min(shorter % 4096, -shorter % 4096) < _fd.PAGE_GAP)
    assert _fd.row_stride(512) == 528 and _fd.row_stride(256) == 264


@pytest.mark.parametrize("case", ["periodic-minimal", "disc-full", "channel-disc-kinetic"])
def test_row_kernel_gives_the_same_bits_without_the_noalias_promise(case):
    # compiled without the noalias promise (so with run-time overlap checks before its
    # vector loop), the row kernel must give the same bits, masked, noisy and kinetic
    # variants included: catches a row kernel that reads through ring/ringx what it
    # writes through rout (the promise would then be false) or a rounding left to the
    # compiler (continuum/_fma.py). The fresh-vs-cached slow test guards whole runs.
    plain = numba.njit(error_model="numpy")(_fd_kernels._row.py_func)
    s = FiniteDifferenceSolver(CASES[case])
    rng = np.random.default_rng(5)
    stride = _fd.row_stride(s.nx)
    ring = 1.0 + 0.3 * rng.normal(size=(2, 3, 3, stride))
    hring = 0.1 * rng.normal(size=(1, 1, 3, stride))
    noise = rng.normal(size=(1, 2, s.ny, s.nx)) if s._noise_amp else None
    fl = None if case == "periodic-minimal" else s._fl
    scheme = _fd.scheme_table(1, False, s.dt)
    out = []
    for kernel in (_fd_kernels._row, plain):
        r, h = ring.copy(), hring.copy()
        kernel(r, r, r, 0, 0, 1, 2, fl, 8, h, 0, noise, s.nx, s.coef.scalars, s._kin,
               *s._terms, s._par, scheme)
        out.append((r, h))
    assert not np.array_equal(out[0][0][1], ring[1])  # the row was written
    np.testing.assert_array_equal(out[0][0], out[1][0])
    np.testing.assert_array_equal(out[0][1], out[1][1])


def test_scratch_and_state_rows_start_on_cache_lines():
    for lead in (0, 1, 5):
        a = _fd.aligned_zeros((3, 4, 16), lead=lead)
        assert a.shape == (3, 4, 16) and a.flags.c_contiguous and not a.any()
        assert (a.ctypes.data + 8 * lead) % _fd.ALIGN == 0
    for buf in _fd.scratch(2, 5, 100)[:3]:  # the first interior column of every row of every band
        assert all(row[1:].ctypes.data % _fd.ALIGN == 0 for row in buf.reshape(-1, buf.shape[-1]))
    s = FiniteDifferenceSolver(CASES["periodic-minimal"])
    assert all(u.ctypes.data % _fd.ALIGN == 0 for pair in s._sets for u in pair)


@pytest.mark.parametrize("coefficients", [MINIMAL, dict(FULL, noise_strength=0.0)])
def test_rhs_on_rectangular_cells_converges_at_second_order(coefficients):
    # Constant coefficients are folded into the stencil weights with dx and dy apart
    # (D_T, and P' and v0 in the minimal variant): on cells twice as long as wide the
    # right-hand side of pressure, D_T, D_rho and the advection of density must still
    # approach the analytic derivatives of smooth fields with error ~ h^2 (central
    # differences; LeVeque, Finite Difference Methods for ODEs and PDEs, SIAM 2007,
    # section 1.1). The other terms are switched off so the reference stays short.
    coeffs = {key: value for key, value in coefficients.items()
              if key in ("pressure", "D_T", "D_rho")}
    coeffs.update(alpha=0.0, beta=0.0)
    p = coeffs["pressure"]
    d_t, d_rho = coeffs["D_T"], coeffs.get("D_rho", 0.0)
    errors = []
    for n in (32, 64):
        cfg = cf.load_config({
            "domain": {"size": [16.0, 24.0]}, "model": {"density": 1.0, "speed": 0.5},
            "run": {"duration": 1.0, "sample_every": 1.0},
            "continuum": {"grid": [n, 3 * n // 4], "dt": 0.001,
                          "method": "finite_difference", "coefficients": coeffs}})
        s = FiniteDifferenceSolver(cfg)
        assert s.dy == pytest.approx(2.0 * s.dx)
        x, y = np.meshgrid(s.x, s.y)
        kx, ky = 2 * np.pi / 16.0, 2 * np.pi / 24.0
        drho = 0.1 * np.sin(kx * x) * np.cos(ky * y)
        wx = 0.2 * np.cos(kx * x + ky * y)
        wy = 0.1 * np.sin(kx * x) * np.sin(ky * y)
        s = FiniteDifferenceSolver(cfg, initial=(1.0 + drho, wx, wy))
        slope = sum((i + 1) * c * drho**i for i, c in enumerate(p))  # P'(rho), rho0 = 1
        grad = (0.1 * kx * np.cos(kx * x) * np.cos(ky * y),
                -0.1 * ky * np.sin(kx * x) * np.sin(ky * y))
        k2 = kx**2 + ky**2
        div = -0.2 * kx * np.sin(kx * x + ky * y) + 0.1 * ky * np.sin(kx * x) * np.cos(ky * y)
        want = (-0.5 * div - d_rho * k2 * drho,
                -slope * grad[0] - d_t * k2 * wx,
                -slope * grad[1] - d_t * k2 * wy)
        got = s.rhs()
        errors.append(np.array([np.max(np.abs(g - w)) for g, w in zip(got, want, strict=True)]))
    order = np.log2(errors[0] / errors[1])
    assert (errors[1] < 1e-4).all()
    assert (order > 1.9).all() and (order < 2.1).all()


_HASH_RUN = """
import hashlib, numba, numpy as np
import crossflock as cf
from crossflock.continuum import FiniteDifferenceSolver
numba.set_num_threads(2)
cfg = cf.load_config({
    "domain": {"size": [256.0, 128.0]}, "model": {"density": 1.0, "speed": 0.5},
    "run": {"duration": 1.0, "sample_every": 1.0, "seed": 4},
    "continuum": {"grid": [256, 128], "dt": 0.05, "method": "finite_difference",
                  "initial_noise": 0.1,
                  "coefficients": {"alpha": 1.0, "beta": 1.0, "pressure": [0.5], "D_T": 0.1}},
})
s = FiniteDifferenceSolver(cfg, workers=2)
s.advance(40)
print(hashlib.sha1(s._u.tobytes()).hexdigest())
"""


@pytest.mark.slow
def test_fresh_and_cached_compilation_give_the_same_numbers(tmp_path):
    # the numbers of a run must not depend on whether numba compiled the kernels in this
    # process or loaded them from its cache (a first run and a second run on one machine);
    # marking the row kernel's arguments noalias broke this once, by round-off
    import os
    import subprocess
    import sys

    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path / "numba"), NUMBA_NUM_THREADS="2")
    hashes = [subprocess.run([sys.executable, "-c", _HASH_RUN], env=env, check=True,
                             capture_output=True, text=True).stdout.strip()
              for _ in range(2)]
    assert len(hashes[0]) == 40 and hashes[0] == hashes[1]
