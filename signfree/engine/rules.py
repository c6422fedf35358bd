"""Gauss-Legendre rules and Chebyshev values at their nodes, in Arb ball
arithmetic.

Nodes and weights: Arb's arb_hypgeom_legendre_p_ui_root (Johansson &
Mezzarobba, SIAM J. Sci. Comput. 40, C726 (2018)), the mirrored half negated
inside the working precision so that every node carries the full precision.
A rule is computed once per (n, precision), kept in memory and on disk
(:func:`cache_dir`), and a rule at a higher precision serves every lower one.

Chebyshev values: T_k(cos t) = Re exp(i k t). :func:`chebyshev_matrix` gives
the table T_k(x_j) for the batch products; :func:`chebyshev_at_nodes` sums
one series by Horner's rule in w = x + i sqrt(1 - x^2). Since |w| = 1 the
ball radii grow only linearly with the degree, whereas the three-term
recurrence T_{k+1} = 2 x T_k - T_{k-1} in ball arithmetic widens the balls
by up to (1 + sqrt 2)^k (the recurrence is stable in floating point, but
balls do not see its cancellations).
"""
import os
import tempfile
from pathlib import Path

from flint import acb, arb, arb_mat, ctx

MAX_CACHED = 24
DISK_MIN_NODES = 256            # smaller rules cost milliseconds: not worth a file
DISK_BUDGET = 64 * 1024 * 1024  # bytes of rules kept on disk; least recently used go first

def on_ladder(n):
    """The smallest node count >= n on the ladder 32 * 1.1^k (rounded up),
    so that node sets (and their cache) are shared between calls."""
    m = 32
    while m < n:
        m = -(-11 * m // 10)
    return m


_NODES = {}


def cache_dir():
    """Where computed Gauss-Legendre rules are kept between runs:
    $SIGNFREE_CACHE, else ~/.cache/signfree; SIGNFREE_CACHE=off keeps none.
    The files hold exact balls (integer mantissas and exponents), so a rule
    read back is the rule computed."""
    where = os.environ.get("SIGNFREE_CACHE")
    if where == "off":
        return None
    return Path(where) if where else Path.home() / ".cache" / "signfree"


def _ball_ints(x):
    m, e = x.mid().man_exp()
    rm, re = x.rad().man_exp()
    return f"{int(m):x} {int(e)} {int(rm):x} {int(re)}"


def _ball(fields):
    m, e, rm, re = int(fields[0], 16), int(fields[1]), int(fields[2], 16), int(fields[3])
    return arb(arb(m) * arb(2) ** e, arb(rm) * arb(2) ** re)


def _read_rule(n, prec):
    folder = cache_dir()
    if folder is None:
        return None
    best = None
    for path in folder.glob(f"gauss-legendre-{n}-*.txt"):
        try:
            p = int(path.stem.rsplit("-", 1)[1])
        except ValueError:
            continue
        if p >= prec and (best is None or p < best[0]):
            best = (p, path)
    if best is None:
        return None
    try:
        os.utime(best[1])   # recently used: kept longest by the eviction
        lines = best[1].read_text().split("\n")
        with ctx.workprec(best[0] + 16):
            half = [(_ball(f[:4]), _ball(f[4:])) for f in (ln.split() for ln in lines if ln)]
    except (OSError, ValueError, IndexError):
        return None
    return half if len(half) == (n + 1) // 2 else None


def _write_rule(n, prec, half):
    folder = cache_dir()
    if folder is None:
        return
    try:
        folder.mkdir(parents=True, exist_ok=True)
        text = "".join(f"{_ball_ints(x)} {_ball_ints(w)}\n" for x, w in half)
        fd, tmp = tempfile.mkstemp(dir=folder, prefix=".gl-")
        with os.fdopen(fd, "w") as f:
            f.write(text)
        os.replace(tmp, folder / f"gauss-legendre-{n}-{prec}.txt")
        _evict(folder, DISK_BUDGET)
    except OSError:
        pass  # a cache that cannot be written only costs time


def _evict(folder, budget):
    """Keep the rule files in ``folder`` within ``budget`` bytes: a rule with
    the same node count at a higher precision on disk makes a file redundant
    (the higher one serves every lower precision), then the least recently
    used go first; the most recent file always stays."""
    files = []
    for path in folder.glob("gauss-legendre-*.txt"):
        try:
            st = path.stat()
            n, p = (int(t) for t in path.stem.split("-")[2:4])
        except (OSError, ValueError):
            continue
        files.append((st.st_mtime, st.st_size, n, p, path))
    top = {}
    for _, _, n, p, _ in files:
        top[n] = max(top.get(n, 0), p)
    kept = []
    for f in files:
        if f[3] < top[f[2]]:
            _unlink(f[4])
        else:
            kept.append(f)
    kept.sort(key=lambda f: f[0])
    total = sum(f[1] for f in kept)
    for f in kept[:-1]:
        if total <= budget:
            break
        _unlink(f[4])
        total -= f[1]


def _unlink(path):
    try:
        path.unlink()
    except OSError:
        pass


def gauss_legendre(n, prec):
    """Nodes and weights of the n-point Gauss-Legendre rule on [-1, 1] to at
    least ``prec`` bits (Arb's arb_hypgeom_legendre_p_ui_root). A rule once
    computed at some precision serves every lower one, in this process and,
    through :func:`cache_dir`, in later runs."""
    if (n, prec) in _NODES:
        return _NODES[n, prec]
    for (m, p), (xs, ws) in list(_NODES.items()):
        if m == n and p > prec:
            # rounded to the working precision: Arb's matrix products lose
            # accuracy on entries carried at far more bits than they work at
            with ctx.workprec(prec + 16):
                _NODES[n, prec] = (tuple(+x for x in xs), tuple(+w for w in ws))
            return _NODES[n, prec]
    half = _read_rule(n, prec) if n >= DISK_MIN_NODES else None
    if half is None:
        with ctx.workprec(prec + 16):
            half = [arb.legendre_p_root(n, k, weight=True) for k in range((n + 1) // 2)]
        if n >= DISK_MIN_NODES:
            _write_rule(n, prec, half)
    with ctx.workprec(prec + 16):  # negation rounds too: keep it inside
        xs = [x for x, _ in half] + [-x for x, _ in reversed(half[: n // 2])]
        ws = [w for _, w in half] + [w for _, w in reversed(half[: n // 2])]
    if len(_NODES) >= 24:
        _NODES.pop(next(iter(_NODES)))
    _NODES[n, prec] = (tuple(xs), tuple(ws))
    return _NODES[n, prec]


_CHEB = {}


def chebyshev_matrix(n, prec, degree):
    """T_k(x_j) for k <= degree at the n Gauss-Legendre nodes, as arb_mat;
    one computed at a higher precision or degree serves."""
    for (m, p, d), T in _CHEB.items():
        if m == n and p >= prec and d == degree:
            return T
    xs, _ = gauss_legendre(n, prec)
    # T_k(cos t) = Re exp(i k t), exp(i t) = x + i sqrt(1 - x^2): with
    # rectangular complex balls each power can widen the radius by up to
    # sqrt(2), so the powers are taken from the exact node midpoints
    # degree/2 + 32 bits above prec and rounded to prec at the end; the
    # nodes' own radii r enter as k^2 r (|T_k'| <= k^2 on [-1, 1])
    with ctx.workprec(prec + degree // 2 + 32):
        steps = [acb(x.mid(), (1 - x.mid() * x.mid()).sqrt()) for x in xs]
        powers, table = list(steps), []
        for _ in range(1, degree + 1):
            table.append([z.real for z in powers])
            powers = [z * s for z, s in zip(powers, steps)]
    with ctx.workprec(prec):
        rows = [[arb(1)] * n] + [[+v + arb(0, (k + 1) ** 2 * x.rad()) for v, x in zip(row, xs)]
                                 for k, row in enumerate(table)]
        T = arb_mat(rows)
    if len(_CHEB) >= 8:
        _CHEB.pop(next(iter(_CHEB)))
    _CHEB[n, prec, degree] = T
    return T


def gauss_legendre_rule(n, prec):
    """(nodes, weights) of the n-point rule on [-1, 1] to at least ``prec``
    bits: :func:`gauss_legendre` under the name the moment and zero
    computations use."""
    return gauss_legendre(n, prec)


_VALUES = {}


def chebyshev_at_nodes(coef, n, prec):
    """sum_k coef[k] T_k(x_j) at the n Gauss-Legendre nodes (arb balls at
    ``prec`` bits); ``coef`` are floats (exact binary numbers); cached."""
    coef = tuple(float(c) for c in coef)
    key = (coef, n, prec)
    if key not in _VALUES:
        xs, _ = gauss_legendre_rule(n, prec)
        out = []
        with ctx.workprec(prec):
            cs = [arb(c) for c in coef]
            for x in xs:
                w = acb(x, ((1 - x) * (1 + x)).sqrt())
                s = acb(cs[-1])
                for c in reversed(cs[:-1]):
                    s = s * w + c
                out.append(s.real)
        if len(_VALUES) >= MAX_CACHED:
            _VALUES.pop(next(iter(_VALUES)))
        _VALUES[key] = out
    return _VALUES[key]
