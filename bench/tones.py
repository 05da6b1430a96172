"""The frequencies view: membrane tones from the eigenvalues in eigen records.

A membrane with wave speed c (c = sqrt(T / rho) for tension T per unit length and areal density
rho) over the domain vibrates in mode k at the frequency

    f_k = c sqrt(lambda_k) / (2 pi)

where lambda_k is the k-th Dirichlet eigenvalue of -Laplace on the domain (the wave equation
u_tt = c^2 Laplace(u) separated as u = v(x) cos(2 pi f t)) [common practice; e.g. Courant &
Hilbert, Methods of Mathematical Physics I, 1953, ch. V]. Lengths are in the units of the domain's
coordinates (metres give hertz for c in m/s). The ratios f_k / f_1 do not depend on c: the
square's are sqrt(5/2) = 1.581..., the disk's j_{1,1}/j_{0,1} = 1.593...: the membrane's overtones
are not harmonic.

`lapbench tones speed=343` prints, for every ``ok`` eigen record under ``results_dir`` (filters
``problem=`` and ``solver=``), each mode's eigenvalue, frequency and ratio to the fundamental,
beside the reference's.

Flat tori: `lapbench tones speed=1 torus=e8e8,d16plus [max_norm=4]` prints the spectrum of each
torus R^d / L (bench/lattice.py: eigenvalues 4 pi^2 |w|^2 over the dual lattice, multiplicities
by exact enumeration) up to |w|^2 <= max_norm, one multiplicity column per torus, the
frequencies f = c sqrt(lambda) / (2 pi) = c |w|, and whether the tori agree there; for exact
bases also the index of the sublattice that each torus's shortest dual vectors generate, an
isometry invariant (1 for E8 + E8, 2 for D16+: one spectrum, two tori). A torus is a
built-in name (e8, e8e8, d16plus, square), conf/torus/<name>.yaml, or a YAML file with `basis`.
"""
from __future__ import annotations

import dataclasses
import math
import sys

from lapbench.config import ConfigError, build_params, positive

__all__ = ["ToneOptions", "wave_speed", "tone_table", "record_tones", "torus_table", "cmd_tones"]


@dataclasses.dataclass
class ToneOptions:
    """Options of `lapbench tones` (key=value arguments)."""

    speed: float | None = None      # wave speed c
    tension: float | None = None    # T: tension per unit length (with density: c = sqrt(T / rho))
    density: float | None = None    # rho: areal density
    results_dir: str = "results"
    problem: str | None = None      # a problem label, id or name
    solver: str | None = None
    torus: str | None = None        # flat tori instead of records: NAME[,NAME...] (bench/lattice.py)
    max_norm: float = 4.0           # tori: dual vectors up to |w|^2 <= max_norm

    def __post_init__(self):
        positive("max_norm", self.max_norm)
        if self.speed is not None:
            if self.tension is not None or self.density is not None:
                raise ConfigError("`speed` cannot be combined with `tension`/`density`; give either "
                                  f"speed=C or tension=T density=RHO (got speed={self.speed!r}, "
                                  f"tension={self.tension!r}, density={self.density!r})")
            positive("speed", self.speed)
        elif self.tension is not None or self.density is not None:
            if self.tension is None or self.density is None:
                missing = "density" if self.density is None else "tension"
                raise ConfigError(f"`{missing}` is needed with "
                                  f"`{'tension' if missing == 'density' else 'density'}` "
                                  f"(c = sqrt(tension / density))")
            positive("tension", self.tension)
            positive("density", self.density)
        else:
            raise ConfigError("`speed` (wave speed c) or `tension` and `density` (c = sqrt(T/rho)) "
                              "must be given, e.g. lapbench tones speed=343")


def wave_speed(opts: ToneOptions) -> float:
    """c from the options: `speed`, or sqrt(tension / density)."""
    return float(opts.speed) if opts.speed is not None else math.sqrt(opts.tension / opts.density)


def tone_table(eigenvalues, speed: float, reference=None):
    """DataFrame: mode, lambda, f = c sqrt(lambda)/(2 pi), ratio f/f_1 (and the reference's)."""
    import numpy as np
    import pandas as pd

    lam = np.asarray(eigenvalues, dtype=float)
    f = speed * np.sqrt(lam) / (2 * np.pi)
    out = pd.DataFrame({"mode": [str(i) for i in range(1, len(lam) + 1)], "lambda": lam, "frequency": f,
                        "ratio": f / f[0]})
    if reference is not None:
        ref = np.asarray(reference, dtype=float)[: len(lam)]
        fr = speed * np.sqrt(ref) / (2 * np.pi)
        out["ref_lambda"] = np.pad(ref, (0, len(lam) - len(ref)), constant_values=np.nan)
        out["ref_frequency"] = np.pad(fr, (0, len(lam) - len(fr)), constant_values=np.nan)
        out["ref_ratio"] = out["ref_frequency"] / fr[0]
    return out


def record_tones(records, speed: float):
    """(title, table) for each ok eigen record."""
    out = []
    for r in records:
        if r.get("status") != "ok" or r["problem"].get("kind") != "eigen" or not r.get("eigenvalues"):
            continue
        k = int(r["problem"].get("n_eigs") or len(r["eigenvalues"]))
        ref = (r["problem"].get("reference") or {}).get("eigenvalues")
        title = (f"{r['problem'].get('id')}  {r['solver']['name']} {r['solver'].get('resolution_label', '')}"
                 f"  seed={r.get('seed')}  (case {r.get('case_id')})")
        out.append((title, tone_table(r["eigenvalues"][:k], speed, ref)))
    return out


def torus_table(spectra, speed: float):
    """(DataFrame, verdict) for flat-torus spectra: |w|^2, lambda = 4 pi^2 |w|^2, f = c |w|, and one
    multiplicity column per torus; the verdict says whether all tori agree up to max_norm."""
    import numpy as np
    import pandas as pd

    def key(v):
        return str(v) if not isinstance(v, float) else f"{v:.12g}"

    rows: dict = {}
    for sp in spectra:
        for v, m in zip(sp.norms, sp.multiplicities):
            rows.setdefault(key(v), {"norm": float(v)})[sp.torus.name] = m
    order = sorted(rows, key=lambda k: rows[k]["norm"])
    norm = np.array([rows[k]["norm"] for k in order])
    lam = 4 * np.pi ** 2 * norm
    out = pd.DataFrame({"|w|^2": order, "lambda": lam, "frequency": speed * np.sqrt(norm)})
    names = []
    for sp in spectra:
        name = sp.torus.name if sp.torus.name not in names else f"{sp.torus.name}#{len(names)}"
        names.append(name)
        out[f"mult {name}"] = [rows[k].get(sp.torus.name, 0) for k in order]
    cols = [f"mult {n}" for n in names]
    same = bool((out[cols].nunique(axis=1) == 1).all()) if len(cols) > 1 else None
    top = min(sp.max_norm for sp in spectra)
    if same is None:
        verdict = f"{len(out)} distinct eigenvalues up to |w|^2 <= {top:g}"
    elif same:
        verdict = (f"one spectrum: the {len(out)} distinct eigenvalues up to |w|^2 <= {top:g} and their "
                   f"multiplicities agree ({', '.join(names)})")
    else:
        first = out.loc[out[cols].nunique(axis=1) > 1, "|w|^2"].iloc[0]
        verdict = f"different spectra: the multiplicities first differ at |w|^2 = {first}"
    return out, verdict


def _cmd_tori(opts: ToneOptions, c: float) -> int:
    from lapbench.lattice import load_torus, shortest_vectors_index, torus_spectrum
    from lapbench.report import to_markdown

    tori = [load_torus(t.strip()) for t in opts.torus.split(",") if t.strip()]
    if not tori:
        raise ConfigError(f"`torus` must name at least one torus, got {opts.torus!r}")
    spectra = [torus_spectrum(t, opts.max_norm) for t in tori]
    table, verdict = torus_table(spectra, c)
    print(f"flat tori R^d/L: lambda = 4 pi^2 |w|^2 over the dual lattice, f = c sqrt(lambda) / (2 pi), "
          f"c = {c:.6g}")
    for t in tori:
        print(f"  {t.name}: dimension {t.dim}, {'exact rational' if t.exact else 'floating-point'} "
              f"arithmetic; {t.source}")
    print()
    print(to_markdown(table))
    print(verdict)
    if len(tori) > 1 and all(t.exact for t in tori):
        # an isometry invariant: isospectral tori need not be isometric (Milnor's pair is not)
        for t in tori:
            norm, count, index = shortest_vectors_index(t)
            print(f"  {t.name}: its {count} shortest dual vectors (|w|^2 = {norm}) generate a sublattice of "
                  f"index {index if index else 'infinity'}")
    sys.stdout.flush()
    return 0


def cmd_tones(argv: list[str]) -> int:
    """`lapbench tones speed=C | tension=T density=RHO [results_dir=..] [problem=..] [solver=..]`."""
    from lapbench.records import load_records
    from lapbench.report import to_markdown

    values = {}
    for a in argv:
        if "=" not in a or a.startswith("-"):
            raise ConfigError(f"`tones` takes key=value arguments (speed, tension, density, results_dir, "
                              f"problem, solver, torus, max_norm); got {a!r}")
        key, _, v = a.partition("=")
        if key in ("speed", "tension", "density", "max_norm"):
            try:
                v = float(v)
            except ValueError:
                raise ConfigError(f"`{key}` must be a number, got {v!r}") from None
        values[key] = v
    opts = build_params(ToneOptions, values)
    c = wave_speed(opts)
    if opts.torus is not None:
        return _cmd_tori(opts, c)
    recs = load_records(opts.results_dir, problem=opts.problem, solver=opts.solver)
    tables = record_tones(recs, c)
    if not tables:
        print(f"(no ok eigen records under {opts.results_dir})")
        return 0
    print(f"membrane tones f_k = c sqrt(lambda_k) / (2 pi), c = {c:.6g} (length units of the domain)\n")
    for title, table in tables:
        print(title)
        print(to_markdown(table))
    sys.stdout.flush()
    return 0
