"""Results with their error budget: one row per mu, each value travelling with
its quadrature, model, edge and statistical errors and a status, and the
formatting that never prints a digit the errors do not support.

All errors are absolute, on the scale of Z(mu)/Z(0) (so they can lie far
below 1e-308; they are mpmath numbers). Status, in order of precedence:

  unresolved     the wanted digits were not reached within the precision and
                 node limits, or quad_err or model_err >= |value|
  misfit         no smoothing of the considered kind fits the data within their
                 errors (or the fit puts weight where the data do not allow it):
                 the value rests on a model the data reject; its digits are kept
                 for inspection
  noise_limited  the statistical error >= |value|, or a model error >= |value|
                 that is noise: the structure below the noise that the data do
                 not exclude, or a change no larger than three times its own
                 statistical spread
  edge_limited   edge_err >= 10% of |value|: the finite data range may hide
                 a contribution as large as the value
  ok             otherwise
A row whose errors reach |value| only when added up takes the status of its
largest error (noise -> noise_limited, edge -> edge_limited, model or
quadrature -> unresolved).
"""
import math
from dataclasses import dataclass, field
from functools import cached_property
from fractions import Fraction

import mpmath
from mpmath.libmp import to_str

STATUSES = ("ok", "edge_limited", "noise_limited", "misfit", "unresolved", "beyond_radius")
EDGE_FRACTION = mpmath.mpf("0.1")


@dataclass(frozen=True)
class Row:
    """One mu: the value Z(mu)/Z(0) (an mpmath mpc) and its error budget."""

    mu: Fraction
    value: mpmath.mpc
    quad_err: mpmath.mpf
    edge_err: mpmath.mpf
    model_err: mpmath.mpf = None
    stat_err: mpmath.mpf = None
    model_noise: mpmath.mpf = None
    resolved: bool = True
    degree: int = None
    digits: int = 12
    fit_ok: bool = True
    structure_err: mpmath.mpf = None

    @cached_property
    def magnitude(self):
        return abs(self.value)

    @cached_property
    def total_err(self):
        """Sum of every error that is known (a conservative combination)."""
        return sum((e for e in (self.quad_err, self.model_err, self.edge_err, self.stat_err)
                    if e is not None), mpmath.mpf(0))

    @cached_property
    def model_err_is_noise(self):
        """True when the model error is no larger than three times the statistical
        spread of that change itself (known with jackknife replicas): it is
        then noise of the larger fits rather than truncation."""
        if self.model_err is None:
            return False
        if self.structure_err is not None and 2 * self.structure_err >= self.model_err:
            return True
        return self.model_noise is not None and self.model_err <= 3 * self.model_noise

    @cached_property
    def status(self):
        mag = self.magnitude
        if not self.resolved or self.quad_err >= mag:
            return "unresolved"
        if not self.fit_ok:
            return "misfit"
        if self.model_err is not None and self.model_err >= mag:
            return "noise_limited" if self.model_err_is_noise else "unresolved"
        if self.stat_err is not None and self.stat_err >= mag:
            return "noise_limited"
        if self.edge_err >= EDGE_FRACTION * mag:
            return "edge_limited"
        if self.total_err >= mag:
            # no single source reaches |value| but together they do: the row
            # takes the status of its largest error
            return {"noise": "noise_limited", "edge": "edge_limited"}.get(
                self.dominant_error, "unresolved")
        return "ok"

    @cached_property
    def last_digit(self):
        """Decimal exponent of the last digit the errors support (the
        position of the total error's leading digit, and no finer than the
        wanted number of significant digits); None when even the leading
        digit of |value| is not supported."""
        mag, err = self.magnitude, self.total_err
        if mag == 0:
            return None
        top = int(mpmath.floor(mpmath.log10(mag)))
        last = top - self.digits + 1
        if not self.fit_ok and self.resolved:
            # a value the data reject: kept for inspection with at most the
            # digits its errors support, and at least three
            if err > 0 and mpmath.isfinite(err):
                last = max(last, int(mpmath.floor(mpmath.log10(err))))
            return min(last, top - 2)
        if err >= mag or self.status == "unresolved":
            return None
        if err > 0:
            last = max(last, int(mpmath.floor(mpmath.log10(err))))
        return last

    def part(self, x, guard=0):
        """A real or imaginary part as a decimal string with only the
        supported digits (and ``guard`` digits more, for values that feed
        further fits): '' when nothing is supported, '0' when the part lies
        below the last digit shown."""
        last = self.last_digit
        if last is None:
            return ""
        last -= guard
        if x == 0:
            return "0"
        nsig = int(mpmath.floor(mpmath.log10(abs(x)))) - last + 1
        return "0" if nsig < 1 else _sci(x, nsig)

    @property
    def avg_phase(self):
        return self.part(self.value.real)

    @property
    def avg_phase_imag(self):
        return self.part(self.value.imag)

    @property
    def cancel_orders(self):
        """-log10 |Z(mu)/Z(0)|; for a row without one supported digit the
        supported lower bound -log10(|value| + total error); None when even
        that bound is not known (an infinite error)."""
        mag = self.magnitude
        if self.last_digit is None:
            bound = mag + self.total_err
            return float(-mpmath.log10(bound)) if mpmath.isfinite(bound) and bound > 0 else None
        return float(-mpmath.log10(mag))

    @cached_property
    def naive_log10_samples(self):
        """log10 of the number of phase-quenched samples that direct
        reweighting would need for the same error: the phase e^{i mu q} has
        variance 1 - |Z/Z0|^2 over the phase-quenched ensemble, so the mean
        of N independent samples has error sqrt((1 - |Z/Z0|^2) / N), and
        N = (1 - |Z/Z0|^2) / err^2 = (1 - |Z/Z0|^2) / (r^2 |Z/Z0|^2) for the
        relative error r (common practice). At least one sample (0); None
        without support."""
        mag, err = self.magnitude, self.total_err
        if self.last_digit is None or err == 0:
            return None
        spread = 1 - mag ** 2
        if spread <= 0:
            return 0.0
        return max(0.0, float(mpmath.log10(spread) - 2 * mpmath.log10(err)))

    @property
    def stat_err_text(self):
        """The statistical error as printed: '0' at mu = 0, where
        Z(0)/Z(0) = 1 holds exactly whatever the data."""
        if self.stat_err is not None and self.mu == 0:
            return "0"
        return error_string(self.stat_err)

    @cached_property
    def dominant_error(self):
        """The largest error source: 'noise', 'model', 'edge' or 'precision'."""
        parts = {"noise": self.stat_err, "model": self.model_err, "edge": self.edge_err,
                 "precision": self.quad_err}
        if not self.resolved:
            return "precision"
        top = max((k for k in parts if parts[k] is not None), key=lambda k: parts[k])
        return "noise" if top == "model" and self.model_err_is_noise else top

    def delta_f(self, volume, guard=0):
        """(Delta f, its statistical error) with Delta f = -ln|Z(mu)/Z(0)| / V,
        as strings rounded where the total error puts the last supported
        digit (``guard`` digits further); ('', '') without a volume or
        without support."""
        if volume is None or self.last_digit is None:
            return "", ""
        mag = self.magnitude
        value = -mpmath.log(mag) / volume
        err = self.total_err / mag / volume
        stat = "" if self.stat_err is None else (
            "0" if self.mu == 0 else error_string(self.stat_err / mag / volume))
        return _round_to_error(value, err, self.digits, guard), stat


def _sci(x, nsig):
    if hasattr(x, "_mpf_"):
        # what mpmath.nstr does for a real mpf, without entering a precision context
        s = to_str(x._mpf_, max(1, nsig), min_fixed=-4, max_fixed=6, strip_zeros=False)
    else:
        with mpmath.workdps(max(15, nsig + 5)):
            s = mpmath.nstr(x, max(1, nsig), min_fixed=-4, max_fixed=6, strip_zeros=False)
    return s.replace(".e", "e").replace("e+", "e").rstrip(".")


def _round_to_error(value, err, digits, guard=0):
    if value == 0:
        return "0"
    top = int(mpmath.floor(mpmath.log10(abs(value))))
    last = top - digits + 1
    if err > 0:
        last = max(last, int(mpmath.floor(mpmath.log10(err))))
    nsig = top - last + 1 + guard
    return "0" if nsig < 1 else _sci(value, nsig)


def _power_of_ten(log10n):
    if log10n is None:
        return ""
    return "1" if log10n < 0.5 else f"1e{int(round(log10n))}"


def error_string(e):
    if e is None:
        return ""
    return "0" if e == 0 else _sci(e, 2)


MU_DIGITS = 20   # significant digits of a mu that has no finite decimal


def format_mu(mu):
    """mu as the exact decimal it is (0.1 stays 0.1, 0.123456789012345678
    keeps every digit); a fraction without a finite decimal (1/3 from
    0:1:4) to MU_DIGITS significant digits; a mu off the real axis by its
    own text ('0.5i', '0.3+0.2i')."""
    if isinstance(mu, int):
        return str(mu)
    if not isinstance(mu, (Fraction, float, mpmath.mpf)):
        return str(mu)
    if isinstance(mu, Fraction):
        den, k2, k5 = mu.denominator, 0, 0
        while den % 2 == 0:
            den, k2 = den // 2, k2 + 1
        while den % 5 == 0:
            den, k5 = den // 5, k5 + 1
        if den == 1:
            k = max(k2, k5)
            n = abs(mu.numerator) * 10 ** k // mu.denominator
            digits = str(n).rjust(k + 1, "0")
            text = digits[:len(digits) - k] + ("." + digits[len(digits) - k:] if k else "")
            text = text.rstrip("0").rstrip(".") if k else text
            return ("-" if mu < 0 else "") + text
    with mpmath.workdps(MU_DIGITS + 5):
        if isinstance(mu, Fraction):
            mu = mpmath.mpf(mu.numerator) / mu.denominator
        s = mpmath.nstr(mpmath.mpmathify(mu), MU_DIGITS)
    return s[:-2] if s.endswith(".0") else s


@dataclass
class ResultTable:
    """Rows over mu, plus what a reader needs to trust them."""

    rows: list
    model_label: str
    volume: float = None
    info: dict = field(default_factory=dict)
    # further columns per row (name -> one string per row) and further rows
    # (dicts by column name, e.g. at mu off the real axis), both appended by
    # records() and columns()
    extra_columns: dict = field(default_factory=dict)
    extra_rows: list = field(default_factory=list)

    GUARD_DIGITS = 2   # digits past the last supported one in results.csv
    COLUMNS = ("mu", "avg_phase", "avg_phase_imag", "avg_phase_err", "delta_f",
               "delta_f_err", "cancel_orders", "quad_err", "model_err", "edge_err",
               "status", "degree", "naive_samples")

    def records(self, guard=0):
        """Rows as dicts of strings, in the column order of results.csv.
        Values are rounded where their total error puts the last supported
        digit; ``guard`` digits more are kept for values that feed further
        fits (results.csv keeps GUARD_DIGITS)."""
        out = []
        for r in self.rows:
            df, dferr = r.delta_f(self.volume, guard)
            out.append({
                "mu": format_mu(r.mu),
                "avg_phase": r.part(r.value.real, guard),
                "avg_phase_imag": r.part(r.value.imag, guard),
                "avg_phase_err": r.stat_err_text,
                "delta_f": df,
                "delta_f_err": dferr,
                "cancel_orders": "" if r.cancel_orders is None else f"{r.cancel_orders:.2f}",
                "quad_err": error_string(r.quad_err),
                "model_err": error_string(r.model_err),
                "edge_err": error_string(r.edge_err),
                "status": r.status,
                "degree": "" if r.degree is None else str(r.degree),
                "naive_samples": _power_of_ten(r.naive_log10_samples),
            })
        for name, values in self.extra_columns.items():
            for rec, v in zip(out, values):
                rec[name] = v
        columns = self.columns()
        out.extend({c: rec.get(c, "") for c in columns} for rec in self.extra_rows)
        return out

    def columns(self):
        """The columns of records(): COLUMNS, then the extra ones."""
        return self.COLUMNS + tuple(c for c in self.extra_columns if c not in self.COLUMNS)

    # the notebook form: float columns for computing, exact strings beside them
    ARRAY_FIELDS = (("mu", "f8"), ("re", "f8"), ("im", "f8"), ("stat_err", "f8"),
                    ("quad_err", "f8"), ("model_err", "f8"), ("edge_err", "f8"),
                    ("total_err", "f8"), ("cancel_orders", "f8"), ("delta_f", "f8"),
                    ("delta_f_err", "f8"), ("degree", "f8"), ("naive_samples_log10", "f8"),
                    ("mu_text", "U40"), ("avg_phase", "U40"), ("avg_phase_imag", "U40"),
                    ("status", "U16"))

    def to_numpy(self):
        """The table as a NumPy structured array, one element per mu: float
        columns (mu, re, im, the errors, cancel_orders, delta_f, degree,
        naive_samples_log10; nan where a value is unknown; values below
        1e-308 become 0.0, so use cancel_orders for the magnitude there) and
        the exact strings of results.csv (mu_text, avg_phase, avg_phase_imag
        with only the supported digits, status)."""
        import numpy as np
        out = np.zeros(len(self.rows), dtype=list(self.ARRAY_FIELDS))
        nan = float("nan")
        for i, (r, rec) in enumerate(zip(self.rows, self.records())):
            mag = r.magnitude
            df = dferr = nan
            if self.volume is not None and mag > 0:
                df = float(-mpmath.log(mag) / self.volume)
                if r.stat_err is not None:
                    dferr = float(r.stat_err / mag / self.volume)

            def f(x):
                return nan if x is None else float(x)
            out[i] = (float(r.mu), float(r.value.real), float(r.value.imag), f(r.stat_err),
                      f(r.quad_err), f(r.model_err), f(r.edge_err), float(r.total_err),
                      f(r.cancel_orders), df, dferr, f(r.degree), f(r.naive_log10_samples),
                      rec["mu"], rec["avg_phase"], rec["avg_phase_imag"], r.status)
        return out

    def to_pandas(self):
        """:meth:`to_numpy` as a pandas DataFrame (pandas is an optional
        extra: ``pip install signfree[pandas]``)."""
        try:
            import pandas
        except ImportError:
            raise ImportError("to_pandas needs pandas (pip install 'signfree[pandas]'); "
                              "to_numpy gives the same table without it") from None
        return pandas.DataFrame.from_records(self.to_numpy())

    def status_counts(self):
        counts = {s: 0 for s in STATUSES}
        for r in self.rows:
            counts[r.status] += 1
        return counts

    def horizon(self):
        """The largest |mu| of the scan up to which every value stays at least
        two total errors (all error sources added) away from zero and is
        resolved, with the reason it stops: the largest error source at the
        first row that fails ('noise', 'model', 'edge', 'precision'; 'radius'
        past the convergence radius of a cumulant series), or 'end of scan'."""
        rows = sorted(self.rows, key=lambda r: abs(r.mu))
        last = None
        for r in rows:
            if r.status in ("unresolved", "beyond_radius", "misfit") \
                    or r.magnitude < 2 * r.total_err:
                reason = {"beyond_radius": "radius", "misfit": "misfit"}.get(
                    r.status, r.dominant_error)
                stop = float(r.mu)
                break
            last = r
        else:
            reason, stop = "end of scan", None
        out = {"mu": None if last is None else float(last.mu),
               "cancel_orders": None if last is None or last.cancel_orders is None
               else round(last.cancel_orders, 2),
               "reason": reason, "first_lost_mu": stop}
        if last is not None and last.naive_log10_samples is not None:
            out["naive_samples_log10"] = round(last.naive_log10_samples, 1)
        return out

    def sign_changes(self):
        """Brackets [mu_k, mu_k+1] where the real phase factor changes sign
        between two neighbouring ok rows whose real parts exceed their total
        errors and whose imaginary parts are negligible (real zeros of
        Z(mu))."""
        out = []
        for a, b in zip(self.rows, self.rows[1:]):
            if a.status != "ok" or b.status != "ok":
                continue
            if any(abs(r.value.real) <= r.total_err for r in (a, b)):
                continue
            if any(abs(r.value.imag) > r.total_err + abs(r.value.real) * 1e-6 for r in (a, b)):
                continue
            if a.value.real * b.value.real < 0:
                out.append([float(a.mu), float(b.mu)])
        return out

    def text(self, reference=None):
        """A readable table; ``reference`` maps mu (Fraction) to an exact
        value (mpf) to print beside the tool's answer."""
        head = ["mu", "Z(mu)/Z(0)", "Im", "stat err", "total err", "orders", "status"]
        if reference is not None:
            head.insert(3, "reference")
        lines = []
        for r, rec in zip(self.rows, self.records()):
            value = rec["avg_phase"] or "(no digit)"
            cols = [rec["mu"], value, rec["avg_phase_imag"] or "", rec["avg_phase_err"] or "-",
                    _sci(r.total_err, 2),
                    ("%s%s" % (">=" if r.last_digit is None and rec["cancel_orders"] else "",
                               rec["cancel_orders"] or "-")),
                    rec["status"]]
            if reference is not None:
                ref = reference.get(r.mu)
                nsig = max(3, min(12, _nsig(rec["avg_phase"])))
                cols.insert(3, "" if ref is None else _sci(ref, nsig))
            lines.append(cols)
        widths = [max(len(h), *(len(c[i]) for c in lines)) for i, h in enumerate(head)]
        fmt = "  ".join("{:>%d}" % w for w in widths)
        return "\n".join([fmt.format(*head)] + [fmt.format(*c) for c in lines])


def _nsig(s):
    mant = s.split("e")[0].replace("-", "").replace(".", "").lstrip("0")
    return len(mant) if mant else 3


def edge_error(model, log_z0, mu):
    """What the finite data range can hide: the endpoint terms of the
    integral, rho(b) / |p'(b) + i mu| at both ends, relative to Z(0) (the
    leading term of integration by parts; a denominator is kept at least
    1 / (q_max - q_min) so that a density that does not fall off still
    counts as fully edge-limited)."""
    return edge_errors(model, log_z0, [mu])[0]


def edge_errors(model, log_z0, mus):
    """:func:`edge_error` for many mu (the model is evaluated once)."""
    if getattr(model, "edge_free", False):
        return [mpmath.mpf(0)] * len(mus)
    a, b = model.domain
    floor_ = 1.0 / (b - a)
    ends = [(mpmath.exp(mpmath.mpf(float(model.log_density(e))) - log_z0),
             float(model.derivative(e))) for e in (a, b)]
    return [sum((r / max(math.hypot(dp, float(mu)), floor_) for r, dp in ends), mpmath.mpf(0))
            for mu in mus]


def density_rises_at_edge(model):
    """True when ln rho does not fall towards an end of the data range, so
    that the range cuts off a part of the density that matters."""
    if getattr(model, "edge_free", False):
        return False
    a, b = model.domain
    return float(model.derivative(a)) <= 0 or float(model.derivative(b)) >= 0


@dataclass
class Analysis:
    """Everything one run produced: the density, the chosen model and how it
    was chosen, the engine's transform and the results table."""

    density: object
    model: object
    fit: object
    transform: object
    table: ResultTable
    seconds: float
    observables: object = None   # analysis.observables.ObservableResult, when asked for
    samples: object = None      # the raw samples the density was binned from, if any
    replica_rows: tuple = None  # (method, first row, count) of the resampled fits in transform
