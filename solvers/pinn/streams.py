"""Activation of derivative streams with a hand-written backward pass.

The forward Laplacian (see `lapbench.solvers.pinn.model`) carries, for every hidden neuron, ``k`` streams
stacked in one tensor of shape ``(k, n, width)``: the value, the ``d`` gradient components and,
for second order, the Laplacian (``k = d + 2``; ``k = d + 1`` for first order). A linear layer
acts on all streams with one matrix product. The activation ``sigma`` acts as

    v' = sigma(z),   g'_i = sigma'(z) gz_i,   l' = sigma'(z) lz + sigma''(z) q,   q = sum_i gz_i^2.

Written with plain torch operations this is about twenty small element-wise kernels per layer,
each recorded on the autograd tape with its own backward node (broadcast multiplications,
reductions, temporaries). Here the backward is derived by hand (chain rule, third derivative
of sigma included), with ``s_j`` the j-th derivative of sigma at z:

    d lz = s1 dl,   d q = s2 dl,   d gz_i = s1 dg_i + 2 gz_i dq,
    d s1 = sum_i dg_i gz_i + dl lz,   d s2 = dl q,
    d z  = s1 dv + s2 d s1 + s3 d s2,

and each line is one or two fused kernels writing into a preallocated stacked gradient, so that
the next matrix products (weight gradient and input gradient) are again single products over
all streams. `bench/perf/pinn_step.py` measures the effect; `tests/test_pinn.py` checks both
functions with torch.autograd.gradcheck. The backward is not itself differentiable
(no double backward; L-BFGS and Adam need none).
"""
from __future__ import annotations

import torch
from torch.autograd.function import once_differentiable

__all__ = ["activate_first", "activate_stacked", "derivatives", "third_derivative"]

# does the activation's third derivative need z itself (not only sigma')?
_KEEP_Z = {"tanh": False, "sin": True, "silu": True}


def derivatives(name: str, z: torch.Tensor, out0: torch.Tensor | None = None):
    """``(sigma, sigma', sigma'')`` of activation `name` at z; sigma is written into `out0` if
    given (for tanh, `z` may be `out0` itself: the activation is then applied in place)."""
    one = z.new_ones(())
    if name == "tanh":
        if out0 is None:
            t = torch.tanh(z)
        else:
            t = out0.tanh_() if z is out0 else torch.tanh(z, out=out0)
        s1 = torch.addcmul(one, t, t, value=-1.0)                       # 1 - t^2
        return t, s1, torch.addcmul(z.new_zeros(()), t, s1, value=-2.0)   # -2 t (1 - t^2)
    if name == "sin":
        s = torch.sin(z, out=out0) if out0 is not None else torch.sin(z)
        return s, torch.cos(z), torch.neg(s)
    if name == "silu":
        sg = torch.sigmoid(z)
        v = torch.mul(z, sg, out=out0) if out0 is not None else z * sg
        sm = sg - sg * sg                                               # sigma (1 - sigma)
        s1 = torch.addcmul(sg, z, sm)                                   # sigma + z sigma (1 - sigma)
        s2 = torch.mul(sg, -2.0).add_(1.0).mul_(z).add_(2.0).mul_(sm)   # sm (2 + z (1 - 2 sigma))
        return v, s1, s2
    raise ValueError(f"unknown activation {name!r}")


def third_derivative(name: str, z: torch.Tensor | None, s1: torch.Tensor) -> torch.Tensor:
    """Third derivative of sigma at z, given its first derivative s1 (z unused for tanh)."""
    if name == "tanh":
        # d/dz [-2 t (1 - t^2)] = (6 t^2 - 2)(1 - t^2) = 4 s1 (1 - 1.5 s1)
        return torch.addcmul(s1, s1, s1, value=-1.5).mul_(4.0)
    if name == "sin":
        return torch.neg(s1)
    if name == "silu":
        # with p = sigma (1 - sigma), r = 1 - 2 sigma: silu''' = p (3 r + z (r^2 - 2 p))
        sg = torch.sigmoid(z)
        p = sg - sg * sg
        r = torch.mul(sg, -2.0).add_(1.0)
        return torch.addcmul(torch.mul(p, -2.0), r, r).mul_(z).add_(r, alpha=3.0).mul_(p)
    raise ValueError(f"unknown activation {name!r}")


def _forward(name, z, gz, lz, order, out):
    """Fill the stacked output ``out`` (k, n, w); return (s1, s2, q) for the backward."""
    d = gz.shape[0]
    _, s1, s2 = derivatives(name, z, out[0])
    torch.mul(gz, s1, out=out[1:d + 1])
    if order == 1:
        return s1, s2, None
    q = torch.mul(gz[0], gz[0])
    for i in range(1, d):
        q.addcmul_(gz[i], gz[i])
    lap = out[d + 1]
    if lz is None:
        torch.mul(s2, q, out=lap)
    else:
        torch.mul(s1, lz, out=lap).addcmul_(s2, q)
    return s1, s2, q


def _backward(name, z, gz, lz, s1, s2, q, grad_out, order, dZ):
    """Write the gradients with respect to the pre-activation streams into dZ (k, n, w).

    gz may be shared by all points (shape (d, 1, w)); dZ is full size either way, and the
    caller sums it over the points where the input broadcast.
    """
    d = gz.shape[0]
    dv, dg = grad_out[0], grad_out[1:d + 1]
    ds1 = torch.mul(dg[0], gz[0])
    for i in range(1, d):
        ds1.addcmul_(dg[i], gz[i])
    dgz = dZ[1:d + 1]
    torch.mul(dg, s1, out=dgz)
    dz = torch.mul(dv, s1, out=dZ[0])
    if order == 2:
        dl = grad_out[d + 1]
        torch.mul(dl, s1, out=dZ[d + 1])                                # d lz
        dq = torch.mul(dl, s2)
        for i in range(d):
            dgz[i].addcmul_(gz[i].expand_as(dq), dq, value=2.0)
        if lz is not None:
            ds1.addcmul_(dl, lz)
        dz.addcmul_(third_derivative(name, z, s1).mul_(q), dl)          # s3 d s2 = s3 q dl
    dz.addcmul_(ds1, s2)


def _activate(ctx, name, order, z, gz, lz, out, keep):
    """Forward of both Functions: fill `out`, save (z if needed, `keep`, s1, s2, q)."""
    s1, s2, q = _forward(name, z, gz, lz, order, out)
    ctx.name, ctx.order = name, order
    ctx.save_for_backward(z if _KEEP_Z[name] else None, keep, s1, s2, q)
    return out


class _Stacked(torch.autograd.Function):
    """Activation of stacked pre-activations ``Z`` (k, n, w); the bias b is added to stream 0."""

    @staticmethod
    def forward(ctx, Z, b, name, order):
        k, n, w = Z.shape
        d = k - order
        out = Z.new_empty((k, n, w))
        if _KEEP_Z[name]:
            z = torch.add(Z[0], b)
        else:
            z = torch.add(Z[0], b, out=out[0])        # the activation then works in place
        return _activate(ctx, name, order, z, Z[1:d + 1], Z[d + 1] if order == 2 else None, out, Z)

    @staticmethod
    @once_differentiable
    def backward(ctx, grad_out):
        z, Z, s1, s2, q = ctx.saved_tensors
        order = ctx.order
        d = Z.shape[0] - order
        lz = Z[d + 1] if order == 2 else None
        dZ = torch.empty_like(Z)
        _backward(ctx.name, z, Z[1:d + 1], lz, s1, s2, q, grad_out.contiguous(), order, dZ)
        return dZ, dZ[0].sum(0), None, None


class _First(torch.autograd.Function):
    """Activation of the first hidden layer: z (n, w) with bias; gz (d, 1, w) the same for every
    point (``scale_i W[:, i]``); the Laplacian of the pre-activation is zero (affine input)."""

    @staticmethod
    def forward(ctx, z, gz, name, order):
        n, w = z.shape
        d = gz.shape[0]
        return _activate(ctx, name, order, z, gz, None, z.new_empty((d + order, n, w)), gz)

    @staticmethod
    @once_differentiable
    def backward(ctx, grad_out):
        z, gz, s1, s2, q = ctx.saved_tensors
        dZ = grad_out.new_empty(grad_out.shape)
        _backward(ctx.name, z, gz, None, s1, s2, q, grad_out.contiguous(), ctx.order, dZ)
        return dZ[0], dZ[1:gz.shape[0] + 1].sum(1, keepdim=True), None, None


def activate_first(name: str, z: torch.Tensor, gz: torch.Tensor, order: int) -> torch.Tensor:
    """Stacked streams (d + order, n, w) after the first activation; see `_First`."""
    return _First.apply(z, gz, name, order)


def activate_stacked(name: str, Z: torch.Tensor, b: torch.Tensor, order: int) -> torch.Tensor:
    """Stacked streams after sigma, for stacked pre-activations Z (k, n, w) and bias b."""
    return _Stacked.apply(Z, b, name, order)
