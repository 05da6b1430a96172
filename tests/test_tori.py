"""Flat tori: dual-lattice enumeration against theta series of even unimodular lattices, brute
force and two-square counts; Milnor's isospectral pair through `lapbench tones`."""
import itertools
import math
import subprocess
from fractions import Fraction

import numpy as np
import pytest

from lapbench.config import ConfigError, conf_dir
from lapbench.lattice import (BUILTIN, Torus, d_plus_basis, gram, inverse, lll_reduce, load_torus, parse_basis,
                           short_vector_counts, shortest_vectors_index, sublattice_index, torus_spectrum,
                           vectors_of_norm)


def sigma(k: int, m: int) -> int:
    """Divisor power sum sigma_k(m), by trial division."""
    return sum(d ** k for d in range(1, m + 1) if m % d == 0)


def _det(M) -> Fraction:
    """Exact determinant by elimination in fractions."""
    A = [list(map(Fraction, r)) for r in M]
    n, det = len(A), Fraction(1)
    for c in range(n):
        p = next((r for r in range(c, n) if A[r][c] != 0), None)
        if p is None:
            return Fraction(0)
        if p != c:
            A[c], A[p], det = A[p], A[c], -det
        det *= A[c][c]
        for r in range(c + 1, n):
            f = A[r][c] / A[c][c]
            A[r] = [a - f * b for a, b in zip(A[r], A[c])]
    return det


@pytest.mark.parametrize("n", [8, 16])
def test_d_plus_bases_are_even_unimodular_and_in_the_lattice(n):
    B = d_plus_basis(n)
    G = gram(B)
    assert _det(G) == 1                                           # unimodular: covolume 1
    assert all(G[i][i] % 2 == 0 for i in range(n))                # even: norms of a basis even
    assert all(v.denominator == 1 for row in G for v in row)      # integral
    for row in B:   # D_n^+ = D_n u (D_n + (1/2)^n): all integers with even sum, or all half-odd
        ints = all(v.denominator == 1 for v in row)
        halves = all((v - Fraction(1, 2)).denominator == 1 for v in row)
        assert (ints and sum(row) % 2 == 0) or (halves and (sum(v - Fraction(1, 2) for v in row)) % 2 == 0)


def test_e8_theta_series():
    # theta_E8 = E_4 = 1 + 240 sum sigma_3(m) q^m (weight-4 Eisenstein series, closed form;
    # Serre, A Course in Arithmetic, 1973, ch. VII): 240 vectors of norm 2, 2160 of norm 4, 6720 of 6
    sp = torus_spectrum(load_torus("e8"), 6)
    assert sp.norms == (0, 2, 4, 6)
    assert sp.multiplicities == (1, 240 * sigma(3, 1), 240 * sigma(3, 2), 240 * sigma(3, 3))
    assert sp.multiplicities[1:3] == (240, 2160)


@pytest.mark.parametrize("name", ["e8e8", "d16plus"])
def test_milnor_pair_theta_series(name):
    # theta = E_8 = 1 + 480 sum sigma_7(m) q^m (weight-8 Eisenstein series, closed form; Milnor,
    # PNAS 51, 1964): 480 vectors of norm 2 and 61920 of norm 4
    sp = torus_spectrum(load_torus(name), 4)
    assert sp.norms == (0, 2, 4)
    assert sp.multiplicities == (1, 480 * sigma(7, 1), 480 * sigma(7, 2))
    assert sp.multiplicities[1:] == (480, 61920)
    assert np.allclose(sp.eigenvalues, 4 * math.pi ** 2 * np.array([0, 2, 4]), rtol=1e-15)


@pytest.mark.slow
def test_milnor_pair_agree_at_norm_six():
    # 480 sigma_7(3) = 1 050 240 (weight-8 Eisenstein series, closed form); about 6 s for both
    for name in ("e8e8", "d16plus"):
        assert torus_spectrum(load_torus(name), 6).multiplicities[-1] == 480 * sigma(7, 3)


def test_config_files_equal_the_builtins():
    for name in ("e8e8", "d16plus"):
        from_file = load_torus(str(conf_dir() / "torus" / f"{name}.yaml"))
        assert from_file.basis == load_torus(name).basis


def test_square_torus_two_square_counts():
    # Z^2 is self-dual: multiplicity of |w|^2 = m is r_2(m) = 4 (d_1(m) - d_3(m)), the number of
    # divisors = 1 and = 3 mod 4 (Jacobi's two-square theorem, closed form)
    sp = torus_spectrum(load_torus("square"), 40)
    got = dict(zip(sp.norms, sp.multiplicities))
    for m in range(1, 41):
        r2 = 4 * sum(1 if d % 4 == 1 else -1 if d % 4 == 3 else 0 for d in range(1, m + 1) if m % d == 0)
        assert got.get(m, 0) == r2, m


def test_rational_basis_dual_norms_exact():
    # L = 2Z x 3Z: L* = (1/2)Z x (1/3)Z, |w|^2 = a^2/4 + b^2/9 (closed form), counted by brute force
    t = Torus("rect", tuple(tuple(r) for r in parse_basis([[2, 0], [0, 3]])))
    sp = torus_spectrum(t, 2)
    brute = {}
    for a, b in itertools.product(range(-10, 11), repeat=2):
        v = Fraction(a * a, 4) + Fraction(b * b, 9)
        if v <= 2:
            brute[v] = brute.get(v, 0) + 1
    assert dict(zip(sp.norms, sp.multiplicities)) == dict(sorted(brute.items()))
    assert sp.norms[1] == Fraction(1, 9) and sp.multiplicities[1] == 2


def test_irrational_basis_uses_floats_hexagonal_dual():
    # unit hexagonal lattice: its dual is hexagonal with shortest norm 4/3; the norms of the
    # hexagonal lattice of minimum 1 are 1, 3, 4, 7 with 6, 6, 6, 12 vectors (closed form: the
    # norm form a^2 + ab + b^2), so the dual's are 4/3 times them
    t = load_torus(str(conf_dir() / "torus" / "hexagonal.yaml"))
    assert not t.exact
    sp = torus_spectrum(t, 10)
    assert np.allclose(sp.norms, [0, 4 / 3, 4, 16 / 3, 28 / 3], rtol=1e-12)
    assert sp.multiplicities == (1, 6, 6, 6, 12)


def test_enumeration_against_brute_force_on_a_skew_form():
    # an arbitrary positive definite integer form in 4 variables, counted by looping over a box
    # that contains the ellipsoid (|n_i| <= sqrt(bound * (A^-1)_ii), a standard bound)
    A = np.array([[4, 1, 0, -1], [1, 3, 1, 0], [0, 1, 5, 2], [-1, 0, 2, 6]])
    bound = 30
    box = [int(math.floor(math.sqrt(bound * v))) for v in np.diag(np.linalg.inv(A))]
    brute = {}
    for n in itertools.product(*[range(-b, b + 1) for b in box]):
        q = int(np.array(n) @ A @ np.array(n))
        if q <= bound:
            brute[q] = brute.get(q, 0) + 1
    assert short_vector_counts(A, bound) == dict(sorted(brute.items()))


def test_exact_inverse():
    M = [[Fraction(2), Fraction(1)], [Fraction(1), Fraction(1)]]
    assert inverse(M) == [[1, -1], [-1, 2]]                      # by hand: det 1


@pytest.mark.parametrize("rows, rule", [
    ([[1, 0], [2, 0]], "is singular"),
    ([[1, 0], [0]], r"`torus\.basis\[1\]` must be a list of 2 numbers"),
    ([[1, "x"], [0, 1]], r"`torus\.basis\[0\]\[1\]` must be a number or a fraction string"),
    ([], r"`torus\.basis` must be a list of d rows"),
])
def test_bad_bases_are_one_line_errors(rows, rule):
    with pytest.raises(ConfigError, match=rule):
        torus_spectrum(Torus("bad", tuple(tuple(r) for r in parse_basis(rows))), 2)


def test_unknown_torus_names_the_choices():
    with pytest.raises(ConfigError, match=r"^`torus` must be one of .*e8e8.*; got 'e9'"):
        load_torus("e9")
    assert set(BUILTIN) >= {"e8", "e8e8", "d16plus"}


def test_tones_shows_one_spectrum_for_milnors_pair(lapbench_cmd):
    p = subprocess.run(lapbench_cmd + ["tones", "speed=1", "torus=e8e8,d16plus"], capture_output=True,
                       text=True, timeout=300)
    assert p.returncode == 0, p.stderr
    assert "| 4 | 1.579e+02 | 2.000e+00 | 61920 | 61920 |" in p.stdout
    assert "one spectrum: the 3 distinct eigenvalues up to |w|^2 <= 4" in p.stdout
    assert "d16plus: its 480 shortest dual vectors (|w|^2 = 2) generate a sublattice of index 2" in p.stdout
    q = subprocess.run(lapbench_cmd + ["tones", "speed=1", "torus=e8,square"], capture_output=True, text=True,
                       timeout=300)
    assert q.returncode == 0 and "different spectra: the multiplicities first differ at |w|^2 = 1" in q.stdout


def test_absurd_bounds_are_refused_up_front():
    with pytest.raises(ConfigError, match=r"^`max_norm` = 12 would count about .* dual vectors of 'e8e8'"):
        torus_spectrum(load_torus("e8e8"), 12)


def test_e8_roots_are_the_known_240():
    # E_8's norm-2 vectors: the 112 vectors +-e_i +- e_j and the 128 vectors (+-1/2)^8 with an
    # even number of minus signs (Conway & Sloane, SPLAG, ch. 4 sec. 8.1), built here directly
    B = np.array(d_plus_basis(8), dtype=float)
    n = vectors_of_norm(np.array(gram(d_plus_basis(8)), dtype=np.int64), 2)   # E8 is self-dual
    got = {tuple(v) for v in (n @ B).tolist()}
    want = set()
    for i, j in itertools.combinations(range(8), 2):
        for si, sj in itertools.product((1.0, -1.0), repeat=2):
            v = [0.0] * 8
            v[i], v[j] = si, sj
            want.add(tuple(v))
    for signs in itertools.product((0.5, -0.5), repeat=8):
        if sum(s < 0 for s in signs) % 2 == 0:
            want.add(signs)
    assert len(want) == 240 and got == want


def test_sublattice_index_by_hand():
    assert sublattice_index([[2, 0], [0, 3]]) == 6                 # det = 6
    assert sublattice_index([[2, 1], [1, 2], [4, 2]]) == 3         # det [[2,1],[1,2]] = 3; third row dependent
    assert sublattice_index([[1, 1], [2, 2]]) == 0                 # rank 1: no finite index


def test_milnor_pair_is_not_isometric():
    # the roots (norm 2) generate E_8 + E_8 itself but only D_16 inside D_16^+, of index 2
    # (D_16^+ = D_16 u (D_16 + h) by construction; Conway & Sloane, SPLAG, ch. 4 sec. 7.1)
    assert shortest_vectors_index(load_torus("e8e8")) == (2, 480, 1)
    assert shortest_vectors_index(load_torus("d16plus")) == (2, 480, 2)


def _skewed(basis, seed=1, moves=40):
    """The same lattice in a badly skewed basis: rows times a random unimodular matrix."""
    rng = np.random.default_rng(seed)
    n = len(basis)
    U = np.eye(n, dtype=np.int64)
    for _ in range(moves):
        i, j = rng.choice(n, 2, replace=False)
        U[i] += int(rng.integers(-3, 4)) * U[j]
    return U, (U.astype(object) @ np.array(basis, dtype=object)).tolist()


def test_spectrum_does_not_depend_on_the_basis_and_lll_is_exact():
    U, rows = _skewed(d_plus_basis(8))
    assert round(abs(np.linalg.det(U.astype(float)))) == 1 and np.abs(U).max() > 50
    t = Torus("skewed_e8", tuple(tuple(r) for r in rows))
    assert torus_spectrum(t, 6).multiplicities == (1, 240, 2160, 6720)      # 240 sigma_3(m), as for E8
    A = np.array(gram(rows), dtype=object)
    R, V = lll_reduce(A)
    assert (R == V @ A @ V.T).all()                                         # exact congruence
    assert round(abs(np.linalg.det(V.astype(float)))) == 1                  # unimodular
    assert max(abs(int(v)) for v in R.ravel()) <= 2 < max(abs(int(v)) for v in A.ravel())
