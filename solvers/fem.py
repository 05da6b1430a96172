"""Finite elements through scikit-fem: Lagrange P1 and P2 on triangle meshes built per domain.

Meshes: pixel masks start from their pixels split into two triangles each; polygons (and
rectangles) start from the ear-clipped, Lawson-flipped coarse
triangulation of `lapbench.domains.polygon` and are refined uniformly (``level`` times), so meshes of
successive levels are nested. Disks start from scikit-fem's four-triangle disk and move new
boundary nodes onto the circle after each refinement; annuli use a polar mesh with nodes on both
circles. For P2 on curved boundaries the mesh is quadratic (isoparametric): edge midpoints on
the boundary lie on the circle, so the geometry error O(h^3) does not spoil the order.
Eigenproblems (`fem_eigen`, also the computed references of `lapbench.problems.reference`) assemble
stiffness and mass on the same meshes and use the shared shift-invert Lanczos of `lapbench.solvers.eigen`.
"""
from __future__ import annotations

import dataclasses
import logging
import math

import numpy as np

from lapbench.config import ConfigError, one_of, positive
from lapbench.solvers.base import Solution, Solver, Tags
from lapbench.solvers.eigen import eigen_solution, eigsh_lowest, field_modes
from lapbench.solvers.linalg import LINEAR_SOLVERS, solve_spd

__all__ = ["FEMP1", "FEMP2", "build_mesh", "FEMFunction", "fem_eigen", "fem_eigen_solution", "MAX_LEVEL"]

# scikit-fem logs every assembly at INFO level; the harness's stdout logging would print them all
logging.getLogger("skfem").setLevel(logging.WARNING)

MAX_LEVEL = 16   # 4^16 times the coarse elements: far beyond any machine; memory estimate refuses earlier
FEM_DOMAINS = frozenset({"rectangle", "polygon", "disk", "annulus", "mask"})


@dataclasses.dataclass
class FEMParams:
    """Options of the finite-element solvers."""

    level: int = 4                   # uniform refinements of the coarse mesh
    h: float | None = None           # target mesh size; when set, the smallest level reaching it
    linear_solver: str = "direct"    # direct | amg
    tol: float = 1e-10               # relative residual for amg

    def __post_init__(self):
        if isinstance(self.level, bool) or not (0 <= self.level <= MAX_LEVEL):
            raise ConfigError(f"`level` must be an integer in [0, {MAX_LEVEL}], got {self.level!r}")
        if self.h is not None:
            positive("h", self.h)
        one_of("linear_solver", self.linear_solver, LINEAR_SOLVERS)
        positive("tol", self.tol)


# -- meshes -------------------------------------------------------------------------------------

def _coarse(domain):
    """Coarse P1 mesh (p (2, N), t (3, T)) and its largest edge, per domain kind."""
    from lapbench.domains import Annulus, Disk, Polygon

    if domain.kind == "rectangle":
        x0, x1, y0, y1 = domain.bbox
        domain = Polygon(vertices=[[x0, y0], [x1, y0], [x1, y1], [x0, y1]])
    if isinstance(domain, Polygon):
        V, _ = domain._corner_vertices()
        tris = domain.triangles.reshape(-1, 2)
        # unique vertex numbering of the coarse triangles
        idx = np.argmin(np.linalg.norm(tris[:, None, :] - V[None], axis=2), axis=1).reshape(-1, 3)
        return V.T.copy(), idx.T.copy()
    if isinstance(domain, Disk):
        p = np.array([[0., 0.], [1., 0.], [0., 1.], [-1., 0.], [0., -1.]]).T
        t = np.array([[0, 1, 2], [0, 1, 4], [0, 2, 3], [0, 3, 4]]).T
        return p, t
    if isinstance(domain, Annulus):
        return None, None
    if domain.kind == "mask":
        return _pixel_triangles(domain)
    raise ConfigError(f"`problem.domain.kind` {domain.kind!r} has no finite-element mesh")


def _pixel_triangles(mask):
    """Coarse mesh of a pixel mask: every True pixel split into two triangles by the diagonal
    from its lower-left to its upper-right corner (nodes = the pixels' corners). On such a
    uniform right-triangle mesh the P1 stiffness matrix is the 5-point stencil [common practice]."""
    I, J = np.nonzero(mask.cells)
    nx, ny = mask.cells.shape
    used = np.zeros((nx + 1, ny + 1), dtype=bool)
    for di in (0, 1):
        for dj in (0, 1):
            used[I + di, J + dj] = True
    index = -np.ones(used.shape, dtype=np.int64)
    ui, uj = np.nonzero(used)
    index[ui, uj] = np.arange(len(ui))
    p = np.vstack([mask.x0 + mask.h * ui, mask.y0 + mask.h * uj]).astype(float)
    a, b, c, d = index[I, J], index[I + 1, J], index[I + 1, J + 1], index[I, J + 1]
    t = np.hstack([np.vstack([a, b, c]), np.vstack([a, c, d])])
    return p, t


def _annulus_mesh(domain, level: int):
    """Polar mesh of the annulus: 8 2^level sectors, radial layers keeping cells near square."""
    from skfem import MeshTri1

    a, b = domain.r_in, domain.r_out
    nth = 8 * 2 ** level
    nr0 = max(1, int(math.ceil((b - a) / (2 * math.pi * 0.5 * (a + b) / 8))))
    nr = nr0 * 2 ** level
    r = np.linspace(a, b, nr + 1)
    th = 2 * np.pi * np.arange(nth) / nth
    R, TH = np.meshgrid(r, th, indexing="ij")               # node (i, j) -> i * nth + j
    p = np.vstack([domain.cx + (R * np.cos(TH)).ravel(), domain.cy + (R * np.sin(TH)).ravel()])
    i, j = np.meshgrid(np.arange(nr), np.arange(nth), indexing="ij")
    n00 = (i * nth + j).ravel()
    n01 = (i * nth + (j + 1) % nth).ravel()
    n10 = ((i + 1) * nth + j).ravel()
    n11 = ((i + 1) * nth + (j + 1) % nth).ravel()
    t = np.hstack([np.vstack([n00, n10, n11]), np.vstack([n00, n11, n01])])
    return MeshTri1(p, t)


def _project_boundary(domain, pts: np.ndarray) -> np.ndarray:
    """Move points (2, k) radially onto the nearest boundary circle of a disk or annulus."""
    c = np.array([[domain.cx], [domain.cy]])
    d = pts - c
    r = np.linalg.norm(d, axis=0)
    if domain.kind == "disk":
        target = np.full_like(r, domain.radius)
    else:
        target = np.where(np.abs(r - domain.r_in) < np.abs(r - domain.r_out), domain.r_in, domain.r_out)
    return c + d * (target / r)


def with_facets(mesh):
    """Give a scikit-fem mesh its facets and t2f, computed with integer keys.

    scikit-fem's ``build_entities`` finds unique facets by ``np.unique(axis=1)`` on index pairs,
    which sorts a structured view and took 8 of the 16 s of setup at level 9 (measured);
    encoding each sorted pair (a, b) as the integer a N + b gives the same facets in the same
    (lexicographic) order and the same t2f with a plain integer sort.
    """
    t = mesh.t
    N = int(t.max()) + 1
    pairs = np.hstack([t[list(ix)] for ix in mesh.elem.refdom.facets])
    pairs = np.sort(pairs, axis=0).astype(np.int64)
    keys, inverse = np.unique(pairs[0] * N + pairs[1], return_inverse=True)
    mesh._facets = np.ascontiguousarray(np.vstack([keys // N, keys % N]).astype(t.dtype))
    mesh._t2f = inverse.reshape(len(mesh.elem.refdom.facets), t.shape[1]).astype(t.dtype)
    return mesh


def boundary_facets(mesh) -> np.ndarray:
    """Facets that belong to one element only (counted from t2f; scikit-fem's own
    ``boundary_facets`` builds the facet-to-element map first, which took 2 s at 260k elements)."""
    count = np.bincount(mesh.t2f.ravel(), minlength=mesh.facets.shape[1])
    return np.nonzero(count == 1)[0]


def coarse_h(domain) -> float:
    """Largest edge of the coarse mesh (level 0)."""
    if domain.kind == "annulus":
        m = _annulus_mesh(domain, 0)
        p, t = m.p, m.t
    else:
        p, t = _coarse(domain)
        if domain.kind == "disk":
            p = p * domain.radius
    e = np.concatenate([np.linalg.norm(p[:, t[i]] - p[:, t[(i + 1) % 3]], axis=0) for i in range(3)])
    return float(e.max())


def build_mesh(domain, level: int, quadratic: bool = False):
    """Triangle mesh of `domain` after `level` uniform refinements (scikit-fem MeshTri1/MeshTri2).

    With ``quadratic=True`` on a disk or annulus, a MeshTri2 whose boundary edge midpoints lie on
    the circle (isoparametric geometry); otherwise a straight-sided MeshTri1.
    """
    from skfem import MeshTri1, MeshTri2

    if domain.kind == "annulus":
        m = with_facets(_annulus_mesh(domain, level))
    elif domain.kind == "disk":
        p, t = _coarse(domain)
        m = with_facets(MeshTri1(p * domain.radius + np.array([[domain.cx], [domain.cy]]), t))
        for _ in range(level):
            m = with_facets(m.refined())
            D = np.unique(m.facets[:, boundary_facets(m)])
            q = m.p.copy()
            q[:, D] = _project_boundary(domain, q[:, D])
            m = with_facets(dataclasses.replace(m, doflocs=q))
    else:
        p, t = _coarse(domain)
        m = with_facets(MeshTri1(p, t))
        for _ in range(level):
            m = with_facets(m.refined())
    if quadratic and domain.kind in ("disk", "annulus"):
        M = with_facets(MeshTri2.from_mesh(m))
        D = M.dofs.get_facet_dofs(boundary_facets(M)).flatten()
        q = M.doflocs.copy()
        q[:, D] = _project_boundary(domain, q[:, D])
        return with_facets(dataclasses.replace(M, doflocs=q))
    return m


# -- evaluation of a finite-element function at arbitrary points ----------------------------------

class FEMFunction:
    """Vectorised point evaluation of a scikit-fem finite-element function.

    Point location: the k nearest element centroids (scipy cKDTree) are candidates; the first
    whose straight-sided barycentric coordinates are all >= 0 contains the point, otherwise (a
    point in the sliver between a chord and the curved boundary) the candidate with the largest
    minimum barycentric coordinate. Reference coordinates: closed form for affine elements,
    Newton's method on the isoparametric map otherwise. Values: the element's basis functions at
    those coordinates (no per-point Python loop).
    """

    K_CANDIDATES = 8

    def __init__(self, basis, u: np.ndarray):
        from scipy.spatial import cKDTree

        self.basis, self.u = basis, np.asarray(u, dtype=float)
        mesh = basis.mesh
        self.P = mesh.p
        self.T = mesh.t
        self.tree = cKDTree(self.P[:, self.T].mean(axis=1).T)
        self.affine = getattr(mesh, "affine", True)

    def locate(self, x: np.ndarray) -> np.ndarray:
        """Element index per point (x: (m, 2))."""
        nel = self.T.shape[1]
        cells = np.empty(len(x), dtype=np.int64)
        todo = np.arange(len(x))
        for k in (self.K_CANDIDATES, 64):
            k = min(k, nel)
            _, cand = self.tree.query(x[todo], k=k)
            cand = cand.reshape(len(todo), k)
            a = self.P[:, self.T[0, cand]]                     # (2, m, k)
            e1 = self.P[:, self.T[1, cand]] - a
            e2 = self.P[:, self.T[2, cand]] - a
            d = x[todo].T[:, :, None] - a
            det = e1[0] * e2[1] - e1[1] * e2[0]
            l1 = (d[0] * e2[1] - d[1] * e2[0]) / det
            l2 = (e1[0] * d[1] - e1[1] * d[0]) / det
            lmin = np.minimum(np.minimum(l1, l2), 1 - l1 - l2)
            best = np.argmax(lmin, axis=1)
            cells[todo] = cand[np.arange(len(todo)), best]
            worst = lmin[np.arange(len(todo)), best]
            # far from every candidate: try more candidates (points well inside are found at once)
            todo = todo[worst < -0.5]
            if not len(todo):
                break
        return cells

    def _reference(self, x: np.ndarray, cells: np.ndarray) -> np.ndarray:
        """Reference coordinates (2, m, 1) of points x (m, 2) in their elements."""
        mapping = self.basis.mapping
        X = x.T[:, :, None]
        if self.affine:
            return mapping.invF(X, tind=cells)
        # Newton on the isoparametric map, started from the straight-sided coordinates
        a = self.P[:, self.T[0, cells]]
        e1 = self.P[:, self.T[1, cells]] - a
        e2 = self.P[:, self.T[2, cells]] - a
        d = x.T - a
        det = e1[0] * e2[1] - e1[1] * e2[0]
        R = np.array([(d[0] * e2[1] - d[1] * e2[0]) / det, (e1[0] * d[1] - e1[1] * d[0]) / det])[:, :, None]
        for _ in range(30):
            F = mapping.F(R, tind=cells)
            J = mapping.DF(R, tind=cells)
            r = X - F
            detJ = J[0, 0] * J[1, 1] - J[0, 1] * J[1, 0]
            dR = np.array([(J[1, 1] * r[0] - J[0, 1] * r[1]) / detJ,
                           (-J[1, 0] * r[0] + J[0, 0] * r[1]) / detJ])
            R = R + dR
            if np.max(np.abs(dR)) < 1e-14:
                break
        return R

    def __call__(self, points: np.ndarray) -> np.ndarray:
        x = np.asarray(points, dtype=float).reshape(-1, 2)
        out = np.empty(len(x))
        b = self.basis
        for s in range(0, len(x), 100_000):
            xs = x[s:s + 100_000]
            cells = self.locate(xs)
            R = self._reference(xs, cells)
            val = np.zeros(len(xs))
            for k in range(b.Nbfun):
                phi = b.elem.gbasis(b.mapping, R, k, tind=cells)[0]
                val += np.asarray(phi).reshape(len(xs)) * self.u[b.element_dofs[k, cells]]
            out[s:s + 100_000] = val
        return out


# -- eigenproblems -------------------------------------------------------------------------------

def fem_eigen(mesh, order: int, k: int):
    """Conforming Lagrange P1/P2 eigenpairs: K x = lambda M x on the interior dofs of `mesh`.

    By the min-max principle the conforming Galerkin eigenvalues bound the exact ones from above
    and converge at order 2p for smooth eigenfunctions (Strang & Fix, An Analysis of the Finite
    Element Method, 1973, ch. 6). On a quadratic (isoparametric) mesh the basis follows the
    curved geometry. Returns (eigenvalues, basis, full coefficient vectors (ndofs, k)).
    """
    from skfem import Basis, BilinearForm, ElementTriP1, ElementTriP2, asm
    from skfem.helpers import dot, grad

    @BilinearForm
    def stiffness(u, v, w):
        return dot(grad(u), grad(v))

    @BilinearForm
    def mass(u, v, w):
        return u * v

    elem = {1: ElementTriP1, 2: ElementTriP2}[order]()
    basis = Basis(mesh, elem, intorder=2 * order + 1)
    K = asm(stiffness, basis)
    M = asm(mass, basis)
    D = basis.get_dofs(facets=boundary_facets(mesh)).flatten()
    free = np.setdiff1d(np.arange(basis.N), D)
    # COLAMD, not the minimum-degree ordering of the grid solvers: on the P2 L-shape matrix with
    # 32k unknowns SuperLU took 15 s with MMD_AT_PLUS_A and 1.1 s with COLAMD (measured here)
    lam, Vi = eigsh_lowest(K[free][:, free].tocsr(), k, M[free][:, free].tocsr(), permc_spec="COLAMD")
    V = np.zeros((basis.N, len(lam)))
    V[free] = Vi
    return lam, basis, V


def fem_eigen_solution(mesh, order: int, k: int, info: dict) -> Solution:
    """Solution object of `fem_eigen`: modes evaluated through the elements' own interpolant."""
    lam, basis, V = fem_eigen(mesh, order, k)
    fields = [FEMFunction(basis, V[:, j]) for j in range(V.shape[1])]
    dofs = int(basis.N - len(basis.get_dofs(facets=boundary_facets(mesh)).flatten()))
    return eigen_solution(lam, field_modes(fields), {**info, "dofs": dofs}, nodes=basis.doflocs.T.copy(),
                          first_values=V[:, 0])


# -- the solvers ----------------------------------------------------------------------------------

class _FEM(Solver):
    family = "fem"
    degree = 1
    Params = FEMParams
    tags = Tags(kinds=frozenset({"laplace", "poisson", "eigen"}), domains=FEM_DOMAINS)

    # skfem and pyamg cost about 0.5 s to import; tiny eigenproblems use scipy.linalg (lapbench.solvers.eigen)
    preload_modules = ("pyamg", "skfem", "skfem.helpers", "scipy.linalg")

    def effective_level(self, domain) -> int:
        """`level`, or the smallest level whose largest edge is at most `h`."""
        if self.params.h is None:
            return self.params.level
        h0 = coarse_h(domain)
        return min(MAX_LEVEL, max(0, int(math.ceil(math.log2(h0 / self.params.h)))))

    def memory_estimate_mb(self, domain=None) -> float:
        """Rough peak memory: elements = coarse elements x 4^level; ~1.5 KB per P1 dof (direct).

        The resolution is checked before the problem is known, so the coarse mesh is taken as 8
        elements (disk 4, annulus 16, L-shape 4).
        """
        level = self.params.level if self.params.h is None else 0
        elems = 8 * 4.0 ** level
        dofs = elems * (0.5 if self.degree == 1 else 2.0)
        per = 600 if self.params.linear_solver == "amg" else 1500 * self.degree
        return dofs * per / 2 ** 20

    def _solve(self, problem, budget, ctx):
        from skfem import Basis, BilinearForm, ElementTriP1, ElementTriP2, LinearForm, asm, condense
        from skfem.helpers import dot, grad

        domain = problem.domain
        level = self.effective_level(domain)
        if problem.kind == "eigen":  # K x = lambda M x by shift-invert Lanczos
            with ctx.phase("setup"):
                mesh = build_mesh(domain, level, quadratic=self.degree == 2)
            with ctx.phase("solve"):
                return fem_eigen_solution(mesh, self.degree, problem.n_eigs,
                                          {"elements": int(mesh.t.shape[1]), "level": int(level),
                                           "h": _mesh_h(mesh), "degree": self.degree})
        with ctx.phase("setup"):
            mesh = build_mesh(domain, level, quadratic=self.degree == 2)
            elem = ElementTriP1() if self.degree == 1 else ElementTriP2()
            # degree 2p: exact stiffness on affine elements, load error below the FE error
            basis = Basis(mesh, elem, intorder=2 * self.degree)

            @BilinearForm
            def laplace(u, v, w):
                return dot(grad(u), grad(v))

            A = asm(laplace, basis)
            if problem.f is not None:
                @LinearForm
                def load(v, w):
                    x = w.x                                   # (2, nelems, nqp)
                    fx = problem.f(np.column_stack([x[0].ravel(), x[1].ravel()])).reshape(x[0].shape)
                    return fx * v

                b = asm(load, basis)
            else:
                b = np.zeros(basis.N)
            D = basis.get_dofs(facets=boundary_facets(mesh)).flatten()
            uD = np.zeros(basis.N)
            if problem.g is not None:
                uD[D] = problem.g(basis.doflocs[:, D].T)
            Ai, bi, ui, I = condense(A, b, x=uD, D=D)
        with ctx.phase("solve"):
            x, info = solve_spd(Ai, bi, self.params.linear_solver, self.params.tol)
        u = uD.copy()
        u[I] = x
        h = _mesh_h(mesh)
        return Solution(evaluate=FEMFunction(basis, u), nodes=basis.doflocs.T.copy(), values=u,
                        info={**info, "dofs": int(len(I)), "elements": int(mesh.t.shape[1]),
                              "level": int(level), "h": h, "degree": self.degree})

    def resolution(self) -> dict:
        return {"level": self.params.level, **({"h": self.params.h} if self.params.h is not None else {})}


def _mesh_h(mesh) -> float:
    p, t = mesh.p, mesh.t
    return float(max(np.linalg.norm(p[:, t[i]] - p[:, t[(i + 1) % 3]], axis=0).max() for i in range(3)))


class FEMP1(_FEM):
    """Continuous piecewise-linear Lagrange finite elements (scikit-fem assembly).

    Galerkin method for -Laplace(u) = f with Dirichlet data interpolated at boundary nodes;
    energy-norm order 1 and L2 order 2 for smooth solutions (Ciarlet, The Finite Element Method
    for Elliptic Problems, 1978; Strang & Fix, An Analysis of the Finite Element Method, 1973),
    sparse direct or AMG-CG solve.
    """

    name = "fem_p1"
    degree = 1
    description = "P1 Lagrange finite elements (scikit-fem), direct or AMG-CG solve (L2 order 2)"
    reference = "Ciarlet, The Finite Element Method for Elliptic Problems, 1978; Strang & Fix 1973"


class FEMP2(_FEM):
    """Continuous piecewise-quadratic Lagrange finite elements, isoparametric on curved boundaries.

    L2 order 3 for smooth solutions; on disks and annuli the quadratic geometry keeps that order
    (Lenoir, "Optimal isoparametric finite elements and error estimates for domains involving
    curved boundaries", SIAM J. Numer. Anal. 23, 1986; Ciarlet & Raviart 1972).
    """

    name = "fem_p2"
    degree = 2
    description = "P2 Lagrange finite elements, isoparametric on curved boundaries (L2 order 3)"
    reference = "Ciarlet 1978; Lenoir, SIAM J. Numer. Anal. 23 (1986) (isoparametric P2)"
