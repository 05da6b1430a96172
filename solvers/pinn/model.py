"""The network: a fully connected net on inputs mapped to [-1, 1]^d, optional random Fourier features.

Besides the plain forward pass the network propagates input derivatives forward through its
layers (value, gradient and Laplacian in one pass, the "forward Laplacian" idea of R. Li et al.,
"A computational framework for neural network-based variational Monte Carlo with Forward
Laplacian", Nature Machine Intelligence 6 (2024) [memory for the venue]). For a layer
``z = W a + b`` followed by ``a' = sigma(z)``:

    grad z = W grad a,    lap z = W lap a,
    grad a' = sigma'(z) grad z,    lap a' = sigma'(z) lap z + sigma''(z) |grad z|^2,

so the gradient and Laplacian of the output cost d + 1 extra rows in each matrix product. The
d + 2 streams are stacked in one (d + 2, n, width) tensor, so each layer is one matrix product,
and the activation of the streams is one autograd node with a hand-derived backward
(`lapbench.solvers.pinn.streams`). The nested autograd and torch.func routes are kept for cross-checking
and for the benchmark in ``bench/perf/pinn_step.py``, which measures all three on this machine.

This module imports torch at import time; ``lapbench.solvers.pinn`` imports it only inside the solver.
"""
from __future__ import annotations

import math
import warnings

import torch
from torch import nn

from lapbench.solvers.pinn.options import ACTIVATIONS, LAPLACIAN_METHODS, PRECISIONS
from lapbench.solvers.pinn.streams import activate_first, activate_stacked

__all__ = ["Network", "ACTIVATIONS", "LAPLACIAN_METHODS", "torch_dtype"]

# the torch functions of the activations named in options.ACTIVATIONS (plain forward pass; the
# derivative streams use lapbench.solvers.pinn.streams)
_ACTIVATION_FUNCTIONS = {"tanh": torch.tanh, "sin": torch.sin, "silu": nn.functional.silu}
_DTYPES = {"float32": torch.float32, "float64": torch.float64}


def torch_dtype(precision: str) -> torch.dtype:
    """``float32`` or ``float64`` as a torch dtype."""
    return _DTYPES[precision]


class Network(nn.Module):
    """Fully connected network ``R^d -> R`` with inputs scaled to [-1, 1]^d.

    Parameters
    ----------
    bbox : sequence of float
        ``(lo_0, hi_0, ..., lo_{d-1}, hi_{d-1})`` (a domain's ``bbox``; ``(x0, x1, y0, y1)`` in 2-D):
        the box mapped affinely onto [-1, 1]^d; d = len(bbox) / 2.
    width, depth : int
        Neurons per hidden layer and number of hidden layers.
    activation : {'tanh', 'sin', 'silu'}
    fourier_features : int
        Number m of random Fourier frequencies (0: none). The first layer then sees
        ``[cos(2 pi B^T x), sin(2 pi B^T x)]`` with B of shape (d, m), entries N(0, scale^2)
        (Tancik et al., NeurIPS 2020; Wang, Wang & Perdikaris, CMAME 384, 2021). B is fixed.
    fourier_scale : float
        Standard deviation of the entries of B (frequencies per unit of the scaled input).
    dtype : torch.dtype
    generator : torch.Generator
        Fixes the initialisation: Glorot-normal weights (Glorot & Bengio, AISTATS 2010), zero biases.
    """

    def __init__(self, bbox, width: int = 50, depth: int = 4, activation: str = "tanh",
                 fourier_features: int = 0, fourier_scale: float = 1.0,
                 dtype: torch.dtype = torch.float32, generator: torch.Generator | None = None):
        super().__init__()
        if activation not in ACTIVATIONS:
            raise ValueError(f"unknown activation {activation!r}; valid: {', '.join(ACTIVATIONS)}")
        b = [float(v) for v in bbox]
        if len(b) < 2 or len(b) % 2:
            raise ValueError(f"bbox must hold (lo, hi) pairs, one per dimension; got {len(b)} numbers")
        lo, hi = b[0::2], b[1::2]
        self.dim = len(lo)
        self.activation = activation
        self._act = _ACTIVATION_FUNCTIONS[activation]
        self.register_buffer("center", torch.tensor([(a + c) / 2 for a, c in zip(lo, hi)], dtype=dtype))
        self.register_buffer("scale", torch.tensor([2.0 / (c - a) for a, c in zip(lo, hi)], dtype=dtype))
        if fourier_features > 0:
            B = torch.randn(self.dim, fourier_features, generator=generator, dtype=torch.float64)
            # stored as the weight of a bias-free linear map x -> 2 pi B^T x
            self.register_buffer("fourier", (2 * math.pi * fourier_scale * B.T).to(dtype))
            n_in = 2 * fourier_features
        else:
            self.fourier = None
            n_in = self.dim
        sizes = [n_in] + [width] * depth + [1]
        self.layers = nn.ModuleList(nn.Linear(a, b, dtype=dtype) for a, b in zip(sizes[:-1], sizes[1:]))
        with torch.no_grad():
            for lin in self.layers:
                nn.init.xavier_normal_(lin.weight, generator=generator)
                lin.bias.zero_()

    @property
    def n_parameters(self) -> int:
        return sum(p.numel() for p in self.parameters())

    # -- plain forward ---------------------------------------------------------------------------
    def features(self, x: torch.Tensor) -> torch.Tensor:
        """Scaled inputs, or their Fourier features."""
        z = (x - self.center) * self.scale
        if self.fourier is not None:
            z = z @ self.fourier.T
            z = torch.cat([torch.cos(z), torch.sin(z)], dim=-1)
        return z

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        """Network values at points ``x`` of shape (n, d) -> (n,)."""
        a = self.features(x)
        for lin in self.layers[:-1]:
            a = self._act(lin(a))
        return self.layers[-1](a).squeeze(-1)

    # -- value, gradient and Laplacian -------------------------------------------------------------
    def derivatives(self, x: torch.Tensor, order: int = 2, method: str = "forward", dims=None):
        """``(u, grad u, lap u)`` (order 2) or ``(u, grad u, None)`` (order 1) at points (n, d).

        ``method`` is one of ``forward`` (derivatives propagated with the values), ``autograd``
        (nested torch.autograd.grad with create_graph) or ``func`` (torch.func jacrev/hessian
        under vmap). All three are differentiable with respect to the weights.

        ``dims`` (a sorted sequence of k coordinate indices, or None for all d): only those
        coordinates are differentiated; ``grad u`` is then (n, k), the partial derivatives along
        ``dims``, and ``lap u`` the partial sum of the k second derivatives ``u_ii``, i in dims
        (unscaled; `lapbench.solvers.pinn.losses.Loss` scales by d / k for the unbiased estimate). The
        forward method then carries k + 2 streams instead of d + 2.
        """
        if dims is not None:
            dims = [int(i) for i in dims]
        if method == "forward":
            return self._forward_derivatives(x, order, dims)
        if method == "autograd":
            return self._autograd_derivatives(x, order, dims)
        if method == "func":
            return self._func_derivatives(x, order, dims)
        raise ValueError(f"unknown Laplacian method {method!r}; valid: {', '.join(LAPLACIAN_METHODS)}")

    def _forward_derivatives(self, x, order, dims=None):
        sel = slice(None) if dims is None else dims
        d = self.dim if dims is None else len(dims)     # differentiated coordinates
        v = (x - self.center) * self.scale
        k = d + order                       # streams: value, d gradient rows, [Laplacian]
        if self.fourier is None:
            # before the first nonlinearity the gradient rows are the same for every point
            # (scale_i W[:, i]) and the Laplacian is zero: the first activation takes them as such
            lin = self.layers[0]
            z = nn.functional.linear(v, lin.weight, lin.bias)
            gz = (self.scale[sel, None] * lin.weight.T[sel])[:, None, :]      # (d, 1, width)
            S = activate_first(self.activation, z, gz, order)
        else:
            # Fourier features are fixed: their streams carry no gradient to the weights
            zf = v @ self.fourier.T
            G0 = (self.scale[sel, None] * self.fourier.T[sel])[:, None, :]    # (d, 1, m)
            c, s = torch.cos(zf), torch.sin(zf)
            streams = [torch.cat([c, s], dim=-1)[None], torch.cat([-s * G0, c * G0], dim=-1)]
            if order == 2:
                sq = (G0 * G0).sum(0)
                streams.append(torch.cat([-c * sq, -s * sq], dim=-1)[None])
            S = torch.cat(streams).to(v.dtype)
            lin = self.layers[0]
            Z = (S.reshape(-1, S.shape[-1]) @ lin.weight.T).view(k, len(x), -1)
            S = activate_stacked(self.activation, Z, lin.bias, order)
        n = S.shape[1]
        for lin in self.layers[1:-1]:
            Z = (S.view(k * n, -1) @ lin.weight.T).view(k, n, -1)
            S = activate_stacked(self.activation, Z, lin.bias, order)
        last = self.layers[-1]
        # a matrix-vector product: its backward is a broadcast outer product, where a
        # (k n, 1) x (1, width) matrix product would be an order of magnitude slower
        Y = torch.mv(S.view(k * n, -1), last.weight[0]).view(k, n)
        u = Y[0] + last.bias
        grad = Y[1:d + 1].T                                                      # (n, d)
        lap = Y[d + 1] if order == 2 else None
        return u, grad, lap

    def _autograd_derivatives(self, x, order, dims=None):
        dims = list(range(self.dim)) if dims is None else dims
        x = x.detach().requires_grad_(True)
        u = self.forward(x)
        (grad,) = torch.autograd.grad(u.sum(), x, create_graph=True)
        if order == 1:
            return u, grad[:, dims], None
        lap = torch.zeros_like(u)
        for i in dims:
            (gi,) = torch.autograd.grad(grad[:, i].sum(), x, create_graph=True)
            lap = lap + gi[:, i]
        return u, grad[:, dims], lap

    def _func_derivatives(self, x, order, dims=None):
        from torch.func import hessian, jacrev, vmap

        def single(p):
            return self.forward(p[None])[0]

        u = self.forward(x)
        sel = slice(None) if dims is None else dims
        grad = vmap(jacrev(single))(x)[:, sel]
        if order == 1:
            return u, grad, None
        with warnings.catch_warnings():   # torch's forward-mode decompositions warn about torch.jit
            warnings.simplefilter("ignore", DeprecationWarning)
            H = vmap(hessian(single))(x)
        return u, grad, H.diagonal(dim1=-2, dim2=-1)[:, sel].sum(-1)
