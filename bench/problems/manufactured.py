"""`expr`: a manufactured solution from an expression string for u(x, y), on any domain."""
from __future__ import annotations

import dataclasses

from lapbench.config import positive
from lapbench.domains import make_domain
from lapbench.problems.base import Problem

__all__ = ["expr", "CATALOGUE"]


@dataclasses.dataclass
class ExprParams:
    u: str = "sin(pi*x)*sin(pi*y)"
    domain: dict = dataclasses.field(default_factory=lambda: {"kind": "rectangle"})
    eval_level: int = 48

    def __post_init__(self):
        positive("eval_level", self.eval_level, integer=True, maximum=2048)


def expr(p: ExprParams) -> Problem:
    """Manufactured solution from an expression string for u(x, y) on any domain.

    sympy derives f = -Laplace(u) and the Dirichlet data g = u; the string is parsed safely
    (lapbench.expr). Source: method of manufactured solutions [common practice].
    """
    from lapbench.expr import manufactured

    m = manufactured(p.u, field="problem.u")
    d = make_domain(p.domain)
    return Problem("expr", "laplace" if m.is_harmonic else "poisson", d, f=None if m.is_harmonic else m.f,
                   g=m.u, exact=m.u, params={"u": p.u},
                   source=f"manufactured: u = {p.u}; f = -Laplace(u) by sympy",
                   eval_level=p.eval_level)


CATALOGUE = {"expr": (ExprParams, expr, "manufactured solution from an expression for u(x, y), any domain")}
