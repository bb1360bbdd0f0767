"""The compiled gravity kernel (libration._gravity) against plain numpy sums.

Two kinds of reference:
- an accurate one: every pairwise term in numpy, summed with math.fsum (correctly
  rounded sums), for the 1e-13 accuracy checks;
- an exact emulation: the same IEEE operations in the same order as the kernel
  promises (each target's sum over sources j = 0, 1, ... in index order), done with
  numpy elementwise operations (correctly rounded sqrt and division, no fused
  multiply-add), which the kernel must match bit for bit.
"""
import math
import multiprocessing

import numpy as np
import pytest

from libration import _gravity
from libration.exceptions import SingularityError, ValidationError


def random_system(rng, n, n_active=None, spread=1.0):
    """Bodies scattered in a cube; masses in (0.1, 1], test particles' masses zero."""
    n_active = n if n_active is None else n_active
    position = rng.uniform(-spread, spread, size=(n, 3))
    mass = rng.uniform(0.1, 1.0, size=n)
    mass[n_active:] = 0.0
    return position, mass, n_active


def fsum_accelerations(position, mass, n_active, G, softening=0.0):
    """Accelerations with every term in numpy and correctly rounded sums (math.fsum)."""
    n = position.shape[0]
    out = np.empty((n, 3))
    for i in range(n):
        d = position[:n_active] - position[i]
        r2 = np.sum(d * d, axis=1) + softening**2
        with np.errstate(divide="ignore", invalid="ignore"):
            terms = (G * mass[:n_active] / r2**1.5)[:, None] * d
        if i < n_active:
            terms = np.delete(terms, i, axis=0)
        out[i] = [math.fsum(terms[:, k]) for k in range(3)]
    return out


def ordered_accelerations(position, mass, n_active, G, softening=0.0):
    """The kernel's operations in the kernel's order, vectorised over targets."""
    n = position.shape[0]
    x, y, z = (position[:, k].copy() for k in range(3))
    eps2 = softening * softening
    ax, ay, az = np.zeros(n), np.zeros(n), np.zeros(n)
    targets = np.arange(n)
    for j in range(n_active):
        gm = G * mass[j]
        keep = targets != j
        dx, dy, dz = x[j] - x[keep], y[j] - y[keep], z[j] - z[keep]
        r2 = dx * dx + dy * dy + dz * dz + eps2
        f = gm / (r2 * np.sqrt(r2))
        ax[keep] += f * dx
        ay[keep] += f * dy
        az[keep] += f * dz
    return np.stack([ax, ay, az], axis=1)


def relative_error(a, reference):
    """Largest |a_i - ref_i| / |ref_i| over bodies (vector norms)."""
    return float(np.max(np.linalg.norm(a - reference, axis=1) / np.linalg.norm(reference, axis=1)))


@pytest.mark.parametrize("n, n_active, softening", [
    (64, 64, 0.0), (200, 200, 0.0), (200, 37, 0.0), (150, 150, 0.05), (300, 11, 0.2)],
    ids=["n64", "n200", "n200-active37", "n150-soft", "n300-active11-soft"])
def test_accelerations_match_accurate_sum(rng, n, n_active, softening):
    position, mass, n_active = random_system(rng, n, n_active)
    G = 0.7
    acc = _gravity.accelerations(position, mass, n_active, G, softening)
    assert relative_error(acc, fsum_accelerations(position, mass, n_active, G, softening)) < 1e-13


@pytest.mark.parametrize("n", list(range(1, 20)) + [31, 32, 33, 65])
def test_every_size_equals_ordered_sum_bitwise(rng, n):
    # Sizes around the tile widths (2 to 8 targets) exercise partial and massive tiles.
    for n_active in sorted({0, 1, n // 2, n}):
        position, mass, _ = random_system(rng, n, n_active)
        acc = _gravity.accelerations(position, mass, n_active, 1.0, 0.01)
        np.testing.assert_array_equal(acc, ordered_accelerations(position, mass, n_active, 1.0, 0.01))


def test_large_system_equals_ordered_sum_bitwise(rng):
    position, mass, n_active = random_system(rng, 700, 300, spread=5.0)
    acc = _gravity.accelerations(position, mass, n_active, 2.5)
    np.testing.assert_array_equal(acc, ordered_accelerations(position, mass, n_active, 2.5))


@pytest.mark.parametrize("threads", [1, 2])
def test_many_particles_across_work_chunks_bitwise(rng, threads):
    # 9001 targets span several of the kernel's work chunks (4096 targets at most each).
    position, mass, n_active = random_system(rng, 9001, 5)
    acc = _gravity.accelerations(position, mass, n_active, 1.0, threads=threads)
    np.testing.assert_array_equal(acc, ordered_accelerations(position, mass, n_active, 1.0))


def test_no_sources_gives_zero(rng):
    position, mass, _ = random_system(rng, 10, 0)
    assert np.all(_gravity.accelerations(position, mass, 0, 1.0) == 0.0)


def test_softened_pair_follows_plummer_law():
    # Plummer softening: a = G m d / (|d|^2 + eps^2)^(3/2) (Plummer 1911 potential).
    position = np.array([[0.0, 0.0, 0.0], [0.3, -0.4, 0.0]])
    mass = np.array([2.0, 0.5])
    eps = 0.25
    acc = _gravity.accelerations(position, mass, 2, 1.0, eps)
    d = position[0] - position[1]
    expected = 2.0 * d / (0.25 + eps**2) ** 1.5
    np.testing.assert_allclose(acc[1], expected, rtol=1e-15, atol=0)
    np.testing.assert_allclose(acc[0], -0.5 / 2.0 * expected, rtol=1e-15, atol=0)


class TestTestParticles:
    def test_particles_source_nothing(self, rng):
        position, mass, _ = random_system(rng, 120, 120)
        n_active = 20
        # Masses listed past n_active are ignored, whatever they are.
        acc_junk_mass = _gravity.accelerations(position, mass, n_active, 1.0)
        mass_zero = mass.copy()
        mass_zero[n_active:] = 0.0
        acc = _gravity.accelerations(position, mass_zero, n_active, 1.0)
        np.testing.assert_array_equal(acc, acc_junk_mass)
        # ... and the same as the massive bodies alone.
        alone = _gravity.accelerations(position[:n_active], mass[:n_active], n_active, 1.0)
        np.testing.assert_array_equal(acc[:n_active], alone)

    def test_particle_feels_the_massive_bodies(self, rng):
        position, mass, n_active = random_system(rng, 1000, 10)
        acc = _gravity.accelerations(position, mass, n_active, 1.0)
        reference = fsum_accelerations(position, mass, n_active, 1.0)
        assert relative_error(acc, reference) < 1e-13

    def test_particle_may_share_a_particles_position(self, rng):
        position, mass, _ = random_system(rng, 12, 4)
        position[9] = position[7]  # two test particles at one place: no singularity
        acc = _gravity.accelerations(position, mass, 4, 1.0)
        np.testing.assert_array_equal(acc[9], acc[7])


@pytest.mark.skipif(not _gravity.HAVE_OPENMP, reason="built without OpenMP")
@pytest.mark.parametrize("n, n_active", [(600, 600), (30000, 10), (1001, 333)],
                         ids=["full", "test-particles", "mixed-odd"])
def test_thread_count_invariance_bitwise(rng, n, n_active):
    assert n * n_active >= _gravity.PARALLEL_MIN_INTERACTIONS  # threads really start
    position, mass, n_active = random_system(rng, n, n_active)
    one = _gravity.accelerations(position, mass, n_active, 1.0, 0.001, threads=1)
    for threads in (2, 3):
        many = _gravity.accelerations(position, mass, n_active, 1.0, 0.001, threads=threads)
        np.testing.assert_array_equal(many, one)


def _child_accelerations(args):
    position, mass, threads = args
    return _gravity.accelerations(position, mass, position.shape[0], 1.0, threads=threads)


@pytest.mark.skipif(not _gravity.HAVE_OPENMP, reason="built without OpenMP")
@pytest.mark.skipif("fork" not in multiprocessing.get_all_start_methods(), reason="no fork() here")
def test_threads_in_a_forked_child_do_not_hang(rng):
    # GNU OpenMP's thread pool does not survive fork(); the kernel must notice that
    # it runs in a forked child (after the parent ran a parallel region) and stay on
    # one thread there, with the same bits.
    position, mass, n_active = random_system(rng, 800, 800)
    parent = _gravity.accelerations(position, mass, n_active, 1.0, threads=2)
    with multiprocessing.get_context("fork").Pool(1) as pool:
        child = pool.map_async(_child_accelerations, [(position, mass, 2)]).get(timeout=60)[0]
    np.testing.assert_array_equal(child, parent)


@pytest.mark.parametrize("isa", _gravity.available_isas())
def test_every_loop_variant_gives_the_same_bits(rng, isa):
    position, mass, n_active = random_system(rng, 203, 97)
    reference = _gravity.accelerations_with_isa("baseline", position, mass, n_active, 1.0, 0.0)
    np.testing.assert_array_equal(
        _gravity.accelerations_with_isa(isa, position, mass, n_active, 1.0, 0.0), reference)
    np.testing.assert_array_equal(
        _gravity.accelerations_with_isa(isa, position, mass, n_active, 1.0, 0.0, threads=2),
        reference)
    np.testing.assert_array_equal(_gravity.accelerations(position, mass, n_active, 1.0), reference)


def test_best_isa_is_available():
    assert _gravity.best_isa() in _gravity.available_isas()
    assert "baseline" in _gravity.available_isas()


def test_scratch_and_out_are_reused(rng):
    position, mass, n_active = random_system(rng, 50, 30)
    scratch = _gravity.workspace(50)
    out = np.full((50, 3), np.nan)
    result = _gravity.accelerations(position, mass, n_active, 1.0, scratch=scratch, out=out)
    assert result is out
    np.testing.assert_array_equal(out, _gravity.accelerations(position, mass, n_active, 1.0))


class TestPotentialEnergy:
    @pytest.mark.parametrize("softening", [0.0, 0.1])
    def test_matches_accurate_sum(self, rng, softening):
        position, mass, n_active = random_system(rng, 80, 50)
        G = 1.3
        terms = [G * mass[i] * mass[j] / math.sqrt(float(np.sum((position[i] - position[j]) ** 2))
                                                   + softening**2)
                 for i in range(n_active) for j in range(i + 1, n_active)]
        expected = -math.fsum(terms)
        energy = _gravity.potential_energy(position, mass, n_active, G, softening)
        assert abs(energy - expected) <= 1e-14 * abs(expected)

    def test_fewer_than_two_massive_bodies(self, rng):
        position, mass, _ = random_system(rng, 5, 1)
        assert _gravity.potential_energy(position, mass, 1, 1.0) == 0.0

    def test_coincident_massive_bodies_raise(self, rng):
        position, mass, _ = random_system(rng, 6, 6)
        position[4] = position[2]
        with pytest.raises(SingularityError, match=r"bodies 2 and 4"):
            _gravity.potential_energy(position, mass, 6, 1.0)


class TestSingularities:
    def test_coincident_massive_bodies_name_both(self, rng):
        position, mass, _ = random_system(rng, 40, 40)
        position[23] = position[5]
        with pytest.raises(SingularityError, match=r"body 5 and massive body 23"):
            _gravity.accelerations(position, mass, 40, 1.0)

    def test_particle_on_a_massive_body_is_named(self, rng):
        position, mass, _ = random_system(rng, 300, 7)
        position[211] = position[3]
        with pytest.raises(SingularityError, match=r"body 211 and massive body 3"):
            _gravity.accelerations(position, mass, 7, 1.0, threads=2)

    def test_last_partial_tile_is_checked(self, rng):
        position, mass, _ = random_system(rng, 13, 2)
        position[12] = position[0]
        with pytest.raises(SingularityError, match=r"body 12 and massive body 0"):
            _gravity.accelerations(position, mass, 2, 1.0)

    def test_softening_removes_the_singularity(self, rng):
        position, mass, _ = random_system(rng, 9, 9)
        position[8] = position[1]
        acc = _gravity.accelerations(position, mass, 9, 1.0, softening=0.01)
        assert np.all(np.isfinite(acc))

    def test_non_finite_position_is_named(self, rng):
        position, mass, _ = random_system(rng, 9, 9)
        position[6, 1] = np.nan
        with pytest.raises(SingularityError, match=r"position\[6\] must be finite"):
            _gravity.accelerations(position, mass, 9, 1.0)

    def test_singularity_error_is_arithmetic(self):
        assert issubclass(SingularityError, ArithmeticError)


class TestValidation:
    def test_position_shape(self):
        with pytest.raises(ValidationError, match=r"position must have shape \(n, 3\), got \(4, 2\)"):
            _gravity.accelerations(np.zeros((4, 2)), np.ones(4), 4, 1.0)

    def test_mass_shape(self):
        with pytest.raises(ValidationError, match=r"mass must have shape \(4,\)"):
            _gravity.accelerations(np.zeros((4, 3)), np.ones(3), 4, 1.0)

    @pytest.mark.parametrize("n_active", [-1, 5])
    def test_n_active_range(self, n_active):
        with pytest.raises(ValidationError, match=r"n_active must be in \[0, 4\]"):
            _gravity.accelerations(np.zeros((4, 3)), np.ones(4), n_active, 1.0)

    def test_threads(self):
        with pytest.raises(ValidationError, match=r"threads must be an integer >= 1, got 0"):
            _gravity.accelerations(np.eye(3), np.ones(3), 3, 1.0, threads=0)

    def test_unknown_isa(self):
        with pytest.raises(ValidationError, match=r"isa must be one of"):
            _gravity.accelerations_with_isa("neon", np.eye(3), np.ones(3), 3, 1.0)

    @pytest.mark.parametrize("out", [np.empty((2, 3)), np.empty((3, 3), dtype=np.float32),
                                     np.empty((3, 6))[:, ::2], [[0.0] * 3] * 3],
                             ids=["shape", "dtype", "strided", "list"])
    def test_out_array(self, out):
        with pytest.raises(ValidationError, match=r"out must be a writeable C-contiguous float64 "
                                                  r"array of shape \(3, 3\)"):
            _gravity.accelerations(np.eye(3), np.ones(3), 3, 1.0, out=out)

    def test_validation_errors_are_value_errors(self):
        assert issubclass(ValidationError, ValueError)

    def test_empty_system(self):
        assert _gravity.accelerations(np.zeros((0, 3)), np.zeros(0), 0, 1.0).shape == (0, 3)


class TestBenchHelpers:
    """libration.bench: the numpy baseline is a correct direct sum; rows have their fields."""

    def test_numpy_baseline_matches_accurate_sum(self, rng):
        from libration.bench import numpy_accelerations
        position, mass, n_active = random_system(rng, 90, 40)
        for chunk in (1, 64, 1 << 14):  # chunks of 1 target, of several, all at once
            acc = numpy_accelerations(position, mass, n_active, 1.5, 0.01, chunk_elements=chunk)
            assert relative_error(acc, fsum_accelerations(position, mass, n_active, 1.5, 0.01)) < 1e-13

    def test_measure_row_and_table(self):
        from libration.bench import format_table, measure
        row = measure("full", 24, 24, threads=(1, 2), min_seconds=0.0, repeats=1)
        assert row["interactions"] == 24 * 23
        for key in ("kernel_1_rate", "kernel_2_rate", "numpy_rate", "vs_numpy", "speedup_2"):
            assert row[key] > 0
        table = format_table([row])
        assert "kernel/numpy" in table and "full" in table and "2T/1T" in table
