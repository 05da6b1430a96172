"""The shared finite-difference Laplacian against closed forms."""
import numpy as np
import pytest

from lapbench.numerics import fd_laplacian


@pytest.mark.parametrize("dim", [1, 2, 3, 5])
def test_fd_laplacian_is_exact_on_quintics(dim):
    """u = sum_i x_i^5 + x_0 x_1^2 (closed form Laplace(u) = sum_i 20 x_i^3 + 2 x_0); the
    fourth-order stencil is exact for degree <= 5 (its error term is h^4 u^(6) / 90)."""
    rng = np.random.default_rng(7)
    pts = rng.uniform(-1, 1, (50, dim))

    def u(p):
        return (p ** 5).sum(axis=1) + (p[:, 0] * p[:, 1] ** 2 if dim > 1 else 0.0)

    exact = (20 * pts ** 3).sum(axis=1) + (2 * pts[:, 0] if dim > 1 else 0.0)
    assert np.allclose(fd_laplacian(u, pts, 1e-2), exact, atol=1e-8)


def test_fd_laplacian_converges_at_fourth_order():
    """u = sin(x) sin(y): Laplace(u) = -2 u (closed form); the error h^4/90 (u_xxxxxx + u_yyyyyy)
    does not cancel here, so it falls by ~16 when h halves."""
    pts = np.array([[0.3, 0.2], [1.1, -0.4]])
    u = lambda p: np.sin(p[:, 0]) * np.sin(p[:, 1])  # noqa: E731
    e1 = np.abs(fd_laplacian(u, pts, 0.1) + 2 * u(pts)).max()
    e2 = np.abs(fd_laplacian(u, pts, 0.05) + 2 * u(pts)).max()
    assert 13 < e1 / e2 < 19, e1 / e2
