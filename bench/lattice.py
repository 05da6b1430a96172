"""Flat tori R^d / L: the Laplacian spectrum from the dual lattice, by exact enumeration.

The eigenfunctions of -Laplace on the torus R^d / L are exp(2 pi i w.x) for w in the dual
lattice L* = {w : w.v in Z for every v in L}, with eigenvalue 4 pi^2 |w|^2; the multiplicity of an
eigenvalue is the number of dual vectors of that norm [common practice; e.g. Milnor, "Eigenvalues
of the Laplace operator on certain manifolds", PNAS 51 (1964) 542]. So the spectrum is the theta
series of L*: counting dual vectors by norm.

Arithmetic. A basis (rows b_1 .. b_d) with rational entries (numbers or strings such as "1/2")
gives the Gram matrix G = B B^T exactly in fractions, and the dual's Gram matrix is G^-1 (the dual
basis is B^-T). With D the common denominator of G^-1, Q(n) = n^T (D G^-1) n is an integer
quadratic form and |w|^2 = Q(n) / D exactly. The form is first LLL-reduced (`lll_reduce`, an
exact unimodular change of basis: same counts, far fewer partial vectors for a skewed basis).
Vectors are enumerated by the Fincke-Pohst method
(Fincke & Pohst, "Improved methods for calculating vectors of short length in a lattice", Math.
Comp. 44, 1985): coordinates from the last to the first, each within the interval that the
Cholesky factor of the form leaves for it, vectorised over all partial vectors at once (in
chunks of at most `CHUNK` rows). The float Cholesky factor only prunes (with a margin); every
vector found is kept or dropped by its exact integer norm Q(n), computed in int64. A basis with
irrational entries falls back to floats and groups norms within a relative 1e-9.

Built-in lattices (Conway & Sloane, Sphere Packings, Lattices and Groups, 3rd ed., 1999, ch. 4,
secs. 7.1 and 8.1): D_n = {x in Z^n : sum x_i even}; D_n^+ = D_n u (D_n + (1/2, ..., 1/2)),
a lattice for even n and even unimodular for n divisible by 8; E_8 = D_8^+. The basis used for
D_n^+ is 2 e_1, e_{i+1} - e_i (i = 1 .. n - 2) and (1/2, ..., 1/2): its rows lie in D_n^+ and its
Gram determinant is 1, so they generate it (both have covolume 1). E_8 + E_8 and D_16^+ are
Milnor's pair: even unimodular lattices of dimension 16, not isometric (their norm-2 vectors form
the root systems E_8 + E_8 and D_16), whose tori have one spectrum because the theta series of an
even unimodular lattice in dimension 16 is a modular form of weight 8 and that space is spanned
by the Eisenstein series E_8 = 1 + 480 sum sigma_7(m) q^m (Milnor 1964; Serre, A Course in
Arithmetic, 1973, ch. VII). A unimodular lattice is its own dual, so these tori's eigenvalues
are 4 pi^2 m for even norms m.
"""
from __future__ import annotations

import dataclasses
import math
from fractions import Fraction
from pathlib import Path

import numpy as np

from lapbench.config import ConfigError

__all__ = ["Torus", "TorusSpectrum", "BUILTIN", "d_plus_basis", "direct_sum", "parse_basis", "gram",
           "inverse", "lll_reduce", "short_vector_counts", "vectors_of_norm", "sublattice_index", "shortest_vectors_index",
           "torus_spectrum", "load_torus", "TORUS_DIR", "MAX_TORUS_DIM"]

CHUNK = 1 << 17          # partial vectors expanded at once (bounds the enumeration's memory)
MAX_TORUS_DIM = 32
MAX_VECTORS = 20_000_000  # refuse enumerations that would count more vectors than this
FLOAT_RTOL = 1e-9        # irrational bases: norms within this relative tolerance are one eigenvalue
TORUS_DIR = Path(__file__).resolve().parent.parent / "conf" / "torus"


def d_plus_basis(n: int) -> list[list[Fraction]]:
    """A basis of D_n^+ (n even): 2 e_1, e_{i+1} - e_i for i = 1 .. n-2, and (1/2, ..., 1/2)."""
    if n < 2 or n % 2:
        raise ValueError(f"D_n^+ needs an even n >= 2, got {n}")
    rows = [[Fraction(2 if j == 0 else 0) for j in range(n)]]
    for i in range(n - 2):
        rows.append([Fraction(-1 if j == i else 1 if j == i + 1 else 0) for j in range(n)])
    rows.append([Fraction(1, 2)] * n)
    return rows


def direct_sum(*bases) -> list[list]:
    """Block-diagonal basis of the orthogonal direct sum."""
    d = sum(len(b) for b in bases)
    out, off = [], 0
    for b in bases:
        for row in b:
            out.append([Fraction(0)] * off + list(row) + [Fraction(0)] * (d - off - len(row)))
        off += len(b)
    return out


BUILTIN = {
    "e8": (lambda: d_plus_basis(8), "E_8 = D_8^+ (Conway & Sloane, SPLAG, ch. 4 sec. 8.1)"),
    "e8e8": (lambda: direct_sum(d_plus_basis(8), d_plus_basis(8)),
             "E_8 + E_8 (Milnor, PNAS 51, 1964; Conway & Sloane, SPLAG, ch. 4 sec. 8.1)"),
    "d16plus": (lambda: d_plus_basis(16), "D_16^+ (Milnor, PNAS 51, 1964; Conway & Sloane, SPLAG, ch. 4 sec. 7.1)"),
    "square": (lambda: [[Fraction(1), Fraction(0)], [Fraction(0), Fraction(1)]], "Z^2: the unit square torus"),
}


# -- exact arithmetic --------------------------------------------------------------------------------
def _entry(v, field: str):
    """A basis entry as a Fraction (ints, decimal floats, "p/q" strings) or a float (irrational)."""
    if isinstance(v, bool):
        raise ConfigError(f"`{field}` must be a number or a fraction string like '1/2', got {v!r}")
    if isinstance(v, int):
        return Fraction(v)
    if isinstance(v, Fraction):
        return v
    if isinstance(v, str):
        try:
            return Fraction(v.strip())
        except (ValueError, ZeroDivisionError):
            try:
                return float(v)
            except ValueError:
                raise ConfigError(f"`{field}` must be a number or a fraction string like '1/2', got {v!r}") from None
    if isinstance(v, float):
        if not math.isfinite(v):
            raise ConfigError(f"`{field}` must be finite, got {v!r}")
        f = Fraction(repr(v))                      # the decimal the user wrote: 0.1 -> 1/10
        return f if f.denominator <= 10 ** 6 else v
    raise ConfigError(f"`{field}` must be a number or a fraction string like '1/2', got {v!r}")


def parse_basis(rows, field: str = "torus.basis") -> list[list]:
    """Validate a square basis (list of d rows of d entries, 1 <= d <= MAX_TORUS_DIM)."""
    if not isinstance(rows, (list, tuple)) or not rows:
        raise ConfigError(f"`{field}` must be a list of d rows of d numbers, got {rows!r}")
    d = len(rows)
    if d > MAX_TORUS_DIM:
        raise ConfigError(f"`{field}` must have at most {MAX_TORUS_DIM} rows, got {d}")
    out = []
    for i, row in enumerate(rows):
        if not isinstance(row, (list, tuple)) or len(row) != d:
            raise ConfigError(f"`{field}[{i}]` must be a list of {d} numbers (a square basis), got {row!r}")
        out.append([_entry(v, f"{field}[{i}][{j}]") for j, v in enumerate(row)])
    return out


def _exact(basis) -> bool:
    return all(isinstance(v, Fraction) for row in basis for v in row)


def gram(basis) -> list[list]:
    """G = B B^T (fractions when the basis is rational)."""
    return [[sum((a * b for a, b in zip(r, s)), Fraction(0) if _exact(basis) else 0.0) for s in basis] for r in basis]


def inverse(M: list[list[Fraction]]) -> list[list[Fraction]]:
    """Exact inverse by Gauss-Jordan elimination in fractions (ValueError if singular)."""
    n = len(M)
    A = [list(row) + [Fraction(int(i == j)) for j in range(n)] for i, row in enumerate(M)]
    for c in range(n):
        p = next((r for r in range(c, n) if A[r][c] != 0), None)
        if p is None:
            raise ValueError("singular matrix")
        A[c], A[p] = A[p], A[c]
        piv = A[c][c]
        A[c] = [v / piv for v in A[c]]
        for r in range(n):
            if r != c and A[r][c] != 0:
                f = A[r][c]
                A[r] = [a - f * b for a, b in zip(A[r], A[c])]
    return [row[n:] for row in A]


# -- enumeration -------------------------------------------------------------------------------------
def _enumerate(A: np.ndarray, bound: float, exact: bool, sink) -> None:
    """Every integer vector n with Q(n) = n^T A n <= bound, passed in chunks to
    ``sink(X, q)`` (X (m, d) coordinates, q their norms: exact int64 when `exact`)."""
    A = np.asarray(A, dtype=np.int64 if exact else float)
    d = len(A)
    try:
        R = np.linalg.cholesky(A.astype(float)).T           # A = R^T R, R upper triangular
    except np.linalg.LinAlgError:
        raise ValueError("the quadratic form is not positive definite (the basis is degenerate)") from None
    r2 = np.diag(R) ** 2
    mu = R / np.diag(R)[:, None]                              # mu[i, j] = r_ij / r_ii
    # the float factor only prunes: a margin keeps every vector whose exact norm is in range
    margin = 1e-7 * max(bound, 1.0) + (0.5 if exact else 0.0)
    limit = bound + margin
    state = {"found": 0}

    def finish(X):
        q = np.einsum("ij,ij->i", X @ A, X)
        keep = q <= (bound if exact else bound * (1 + 1e-12))
        state["found"] += int(keep.sum())
        if state["found"] > MAX_VECTORS:
            raise ValueError(f"more than {MAX_VECTORS} lattice vectors below the bound; lower it")
        sink(X[keep], q[keep])

    def descend(i, S, T, X):
        # T[:, k] = sum_{j > i} mu[k, j] x_j for k <= i; X holds x_{i+1} .. x_{d-1} (columns i+1..)
        if i < 0:
            finish(X)
            return
        c = -T[:, i]
        rad = np.sqrt(np.maximum(limit - S, 0.0) / r2[i])
        lo = np.ceil(c - rad - 1e-12).astype(np.int64)
        hi = np.floor(c + rad + 1e-12).astype(np.int64)
        n = np.maximum(hi - lo + 1, 0)
        ends = np.cumsum(n)
        start = 0
        while start < len(n):
            # parent rows [start, stop) expand to at most CHUNK children (at least one parent)
            base = ends[start - 1] if start else 0
            stop = max(int(np.searchsorted(ends, base + CHUNK, side="right")), start + 1)
            cnt = n[start:stop]
            total = int(cnt.sum())
            if total:
                idx = np.repeat(np.arange(start, stop), cnt)
                offs = np.arange(total) - np.repeat(np.cumsum(cnt) - cnt, cnt)
                x = lo[idx] + offs
                S2 = S[idx] + r2[i] * (x - c[idx]) ** 2
                keep = S2 <= limit
                idx, x, S2 = idx[keep], x[keep], S2[keep]
                X2 = X[idx].copy()
                X2[:, i] = x
                T2 = T[idx, :i] + x[:, None] * mu[:i, i][None, :]
                descend(i - 1, S2, T2, X2)
            start = stop

    descend(d - 1, np.zeros(1), np.zeros((1, d)), np.zeros((1, d), dtype=np.int64 if exact else float))


def lll_reduce(A, delta: float = 0.99):
    """LLL reduction of a positive definite Gram matrix: (U A U^T, U) with U unimodular (integer,
    det +-1) such that the new basis is LLL-reduced with parameter delta (Lenstra, Lenstra &
    Lovasz, "Factoring polynomials with rational coefficients", Math. Ann. 261, 1982; the Gram-
    matrix form of Cohen, A Course in Computational Algebraic Number Theory, 1993, alg. 2.6.3).

    Integer A (exact path) is transformed in Python integers, so U A U^T is exact whatever the
    floats that steer the reduction; a float A is transformed in floats. Vector counts by norm
    do not change under U, and enumeration over a reduced form visits far fewer partial vectors.
    """
    exact = np.asarray(A).dtype.kind in "iuO"
    G = np.array(A, dtype=object) if exact else np.array(A, dtype=float)
    n = len(G)
    U = np.eye(n, dtype=object if exact else np.int64)

    def gso(M):
        """mu (unit lower triangular) and B (squared Gram-Schmidt lengths) with M = mu diag(B) mu^T."""
        M = np.asarray(M, dtype=float)
        mu, B = np.eye(n), np.zeros(n)
        for i in range(n):
            for j in range(i):
                mu[i, j] = (M[i, j] - np.dot(mu[i, :j] * mu[j, :j], B[:j])) / B[j]
            B[i] = M[i, i] - np.dot(mu[i, :i] ** 2, B[:i])
        return mu, B

    def add(k, j, q):            # b_k <- b_k - q b_j
        G[k, :] -= q * G[j, :]
        G[:, k] -= q * G[:, j]
        U[k, :] -= q * U[j, :]

    def swap(k):
        G[[k - 1, k], :] = G[[k, k - 1], :]
        G[:, [k - 1, k]] = G[:, [k, k - 1]]
        U[[k - 1, k], :] = U[[k, k - 1], :]

    k, steps = 1, 0
    while k < n and steps < 100 * n * n:
        steps += 1
        mu, B = gso(G)
        for j in range(k - 1, -1, -1):
            q = int(round(mu[k, j]))
            if q:
                add(k, j, q)
                mu[k, : j + 1] -= q * mu[j, : j + 1]
        mu, B = gso(G)
        if B[k] >= (delta - mu[k, k - 1] ** 2) * B[k - 1]:
            k += 1
        else:
            swap(k)
            k = max(k - 1, 1)
    return G, U


def short_vector_counts(A: np.ndarray, bound: float, exact: bool = True) -> dict:
    """Counts of integer vectors n by Q(n) = n^T A n for all n with Q(n) <= bound (n = 0 included).

    A: symmetric positive definite; integer entries when `exact` (then Q is computed in int64
    and the keys are ints), floats otherwise. Fincke-Pohst enumeration, vectorised (module
    docstring).
    """
    counts: dict = {}

    def count(X, q):
        vals, cnt = np.unique(q, return_counts=True)
        for v, c in zip(vals.tolist(), cnt.tolist()):
            counts[v] = counts.get(v, 0) + int(c)

    _enumerate(A, bound, exact, count)
    return dict(sorted(counts.items()))


def vectors_of_norm(A: np.ndarray, q: int) -> np.ndarray:
    """All integer vectors n with n^T A n == q exactly (A an integer form), shape (N, d)."""
    found = []
    _enumerate(A, q, True, lambda X, norms: found.append(X[norms == q]))
    return np.vstack(found) if found else np.zeros((0, len(A)), dtype=np.int64)


def sublattice_index(vectors) -> int:
    """Index in Z^d of the lattice the integer `vectors` (rows) generate; 0 if they do not span.

    Integer row reduction (Euclid's algorithm on each column, Hermite's normal form up to signs
    [common practice]) in Python integers: the index is the product of the pivots.
    """
    rows = [list(map(int, r)) for r in np.asarray(vectors).tolist() if any(r)]
    d = len(np.asarray(vectors)[0]) if len(vectors) else 0
    index = 1
    for c in range(d):
        active = [r for r in rows if r[c] != 0]
        rest = [r for r in rows if r[c] == 0]
        while len(active) > 1:
            active.sort(key=lambda r: abs(r[c]))
            p = active[0]
            nxt = [p]
            for r in active[1:]:
                f = r[c] // p[c]
                r = [a - f * b for a, b in zip(r, p)]
                if r[c] != 0:
                    nxt.append(r)
                elif any(r):
                    rest.append(r)
            active = nxt
        if not active:
            return 0
        index *= abs(active[0][c])
        rows = rest
    return index


# -- tori ----------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True)
class Torus:
    """R^d / L for the lattice L spanned by the rows of `basis`."""

    name: str
    basis: tuple
    source: str = ""

    @property
    def dim(self) -> int:
        return len(self.basis)

    @property
    def exact(self) -> bool:
        return _exact(self.basis)


@dataclasses.dataclass(frozen=True)
class TorusSpectrum:
    """Distinct eigenvalues 4 pi^2 |w|^2 (ascending) with multiplicities, |w|^2 <= max_norm."""

    torus: Torus
    norms: tuple            # |w|^2 of the dual vectors: Fractions (exact) or floats
    multiplicities: tuple
    max_norm: float

    @property
    def eigenvalues(self) -> np.ndarray:
        return 4 * math.pi ** 2 * np.array([float(v) for v in self.norms])


def _refuse_large(torus: Torus, G: np.ndarray, max_norm: float) -> None:
    """Refuse up front when the dual vectors below the bound would be too many to count.

    Gauss's volume estimate: about vol(ball of radius sqrt(max_norm)) / covol(L*) vectors, with
    covol(L*) = 1 / sqrt(det G) [common practice]; it undercounts small radii by a small factor
    (E8 + E8 at |w|^2 <= 6: 0.4 M estimated, 1.1 M counted), so the limit is applied to it.
    """
    sign, logdet = np.linalg.slogdet(G)
    if sign <= 0:
        return          # singular: the exact / float paths say so with the basis named
    d = torus.dim
    log_est = (d / 2) * math.log(math.pi * max(max_norm, 1e-300)) - math.lgamma(d / 2 + 1) + 0.5 * logdet
    if log_est > math.log(MAX_VECTORS):
        raise ConfigError(f"`max_norm` = {max_norm:g} would count about {math.exp(log_est):.2g} dual vectors "
                          f"of {torus.name!r} (at most {MAX_VECTORS:.0e}); lower it")


def torus_spectrum(torus: Torus, max_norm: float) -> TorusSpectrum:
    """The spectrum of -Laplace on the torus up to |w|^2 <= max_norm (eigenvalue 4 pi^2 max_norm)."""
    if not max_norm >= 0:
        raise ConfigError(f"`max_norm` must be >= 0, got {max_norm!r}")
    G = gram(torus.basis)
    _refuse_large(torus, np.array(G, dtype=float), max_norm)
    if torus.exact:
        try:
            Gi = inverse(G)
        except ValueError:
            raise ConfigError(f"`torus.basis` of {torus.name!r} is singular (its rows are dependent)") from None
        D = math.lcm(*(v.denominator for row in Gi for v in row))
        A = np.array([[int(v * D) for v in row] for row in Gi], dtype=object)
        if max(abs(int(v)) for v in A.ravel()) * torus.dim ** 2 * max(D * max_norm, 1) > 2 ** 62:
            raise ConfigError(f"`torus.basis` of {torus.name!r}: the dual Gram matrix has denominators "
                              f"too large for exact int64 norms (common denominator {D})")
        try:
            A = lll_reduce(A.astype(object))[0]          # same counts, fewer partial vectors
            if max(abs(int(v)) for v in A.ravel()) * torus.dim ** 2 * max(D * max_norm, 1) > 2 ** 62:
                raise ValueError("the reduced dual Gram matrix is too large for exact int64 norms")
            counts = short_vector_counts(A.astype(np.int64), float(math.floor(D * Fraction(max_norm))), exact=True)
        except ValueError as exc:
            raise ConfigError(f"`torus.basis` of {torus.name!r}: {exc}") from None
        norms = tuple(Fraction(q, D) for q in counts)
        mult = tuple(counts.values())
    else:
        Gf = np.array(G, dtype=float)
        try:
            Ai = np.linalg.inv(Gf)
            counts = short_vector_counts(lll_reduce((Ai + Ai.T) / 2)[0], float(max_norm), exact=False)
        except (np.linalg.LinAlgError, ValueError) as exc:
            raise ConfigError(f"`torus.basis` of {torus.name!r}: {exc}") from None
        norms, mult = [], []
        for v, c in counts.items():
            if norms and abs(v - norms[-1]) <= FLOAT_RTOL * max(abs(norms[-1]), 1e-300):
                mult[-1] += c
            else:
                norms.append(v)
                mult.append(c)
        norms, mult = tuple(norms), tuple(mult)
    return TorusSpectrum(torus, norms, mult, float(max_norm))


def load_torus(spec: str) -> Torus:
    """A torus by built-in name, by conf/torus/<name>.yaml, or by a YAML file path.

    The YAML mapping has `name`, either `basis` (d rows of d entries: numbers or fraction strings)
    or `builtin` (one of BUILTIN), and `source`.
    """
    if spec in BUILTIN:
        make, src = BUILTIN[spec]
        return Torus(spec, tuple(tuple(r) for r in make()), src)
    path = Path(spec) if spec.endswith((".yaml", ".yml")) else TORUS_DIR / f"{spec}.yaml"
    if not path.is_file():
        known = sorted(set(BUILTIN) | {p.stem for p in TORUS_DIR.glob("*.yaml")})
        raise ConfigError(f"`torus` must be one of {', '.join(known)} or a YAML file; got {spec!r}")
    from omegaconf import OmegaConf

    cfg = OmegaConf.to_container(OmegaConf.load(path), resolve=True)
    if not isinstance(cfg, dict):
        raise ConfigError(f"`torus` file {path} must hold a mapping (name, basis or builtin, source)")
    unknown = sorted(set(cfg) - {"name", "basis", "builtin", "source"})
    if unknown:
        raise ConfigError(f"`torus.{unknown[0]}` is not a known field; known fields: basis, builtin, name, source")
    name = str(cfg.get("name", path.stem))
    if ("basis" in cfg) == ("builtin" in cfg):
        raise ConfigError(f"`torus` file {path} must give exactly one of `basis` and `builtin`")
    if "builtin" in cfg:
        if cfg["builtin"] not in BUILTIN:
            raise ConfigError(f"`torus.builtin` must be one of {', '.join(sorted(BUILTIN))}; got {cfg['builtin']!r}")
        make, src = BUILTIN[cfg["builtin"]]
        return Torus(name, tuple(tuple(r) for r in make()), str(cfg.get("source", src)))
    basis = parse_basis(cfg["basis"])
    return Torus(name, tuple(tuple(r) for r in basis), str(cfg.get("source", "")))


def shortest_vectors_index(torus: Torus) -> tuple[Fraction, int, int]:
    """(norm, count, index) of the shortest nonzero dual vectors and the index of the sublattice of
    L* they generate (exact bases only): an isometry invariant. For Milnor's pair the shortest
    vectors (norm 2, 480 of them: the roots) generate all of E_8 + E_8 (index 1) but only D_16
    inside D_16^+ (index 2), so the two tori are not isometric though isospectral."""
    if not torus.exact:
        raise ConfigError(f"`torus` {torus.name!r}: the shortest-vector index needs an exact (rational) basis")
    Gi = inverse(gram(torus.basis))
    D = math.lcm(*(v.denominator for row in Gi for v in row))
    A = np.array([[int(v * D) for v in row] for row in Gi], dtype=np.int64)
    q = min(int(A[i, i]) for i in range(len(A)))           # some vector has this norm: a bound
    counts = short_vector_counts(A, q)
    q1 = min(v for v in counts if v > 0)
    vecs = vectors_of_norm(A, q1)
    return Fraction(q1, D), len(vecs), sublattice_index(vecs)
