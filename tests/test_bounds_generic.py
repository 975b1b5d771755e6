"""Generic checks run over every registered bound (``finitekey.bounds.all_bounds()``).

Only the public Bound interface is used: the declared parameters, their
``typical`` ranges and domains, ``exact`` and ``size_parameters``.  External
references: mpmath at 50 digits (numpy and certified evaluators are compared
against it).
"""

from __future__ import annotations

import importlib
import itertools
import math
import pkgutil
import subprocess
import sys
from pathlib import Path

import mpmath
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

import finitekey.bounds as fb
from finitekey.errors import InputError

BOUNDS = fb.all_bounds()
NAMES = [b.name for b in BOUNDS]
EPS_GRID = (1e-2, 1e-6, 1e-15, 1e-30)
ROOT = Path(__file__).resolve().parents[1]
HYP = settings(max_examples=20, deadline=None, derandomize=True,
               suppress_health_check=[HealthCheck.filter_too_much, HealthCheck.too_slow])


def _levels(p):
    """Low, middle (geometric where possible) and high typical value of a parameter."""
    lo, hi = (float(v) for v in p.typical)
    mid = math.sqrt(lo * hi) if lo > 0 and hi > 0 else 0.5 * (lo + hi)
    vals = [lo, mid, hi]
    if p.domain.integer:
        vals = [int(round(v)) for v in vals]
    return sorted(set(vals))


def _valid(bound, point) -> bool:
    try:
        bound.check_params(point)
    except InputError:
        return False
    return True


def grid(bound):
    """Valid points of the product of the typical levels (joint constraints filter some out)."""
    names = [p.name for p in bound.parameters]
    pts = [dict(zip(names, combo)) for combo in itertools.product(*[_levels(p) for p in bound.parameters])]
    pts = [pt for pt in pts if _valid(bound, pt)]
    assert pts, f"{bound.name}: no valid point in the product of typical ranges"
    return pts


def _cases(bound, full=False):
    """(point, eps) cases.  Exact-tail bounds are costly at huge sizes in mpmath, so the default run uses
    their three first grid points and two levels; the full product runs under ``-m slow``."""
    pts = grid(bound)
    if bound.exact and not full:
        return [(pt, eps) for pt in pts[:3] for eps in (EPS_GRID[0], EPS_GRID[-1])]
    return [(pt, eps) for pt in pts for eps in EPS_GRID]


def _dev_or_none(bound, pt, eps):
    from finitekey.errors import ComputationError
    try:
        return bound.deviation_mp(eps, dps=50, **pt)
    except ComputationError:
        return None


def _rel(a, b):
    a, b = mpmath.mpf(a), mpmath.mpf(b)
    if a == b:
        return 0.0
    return float(abs(a - b) / max(abs(a), abs(b)))


def test_every_bound_is_listed():
    assert len(BOUNDS) >= 1
    assert len(set(NAMES)) == len(NAMES)


# ---- numpy vs mpmath vs certified ----------------------------------------------------------------
def _full_cases(test):
    """Slow copy of a test over the full grid, for the exact-tail bounds."""
    exact = [b for b in BOUNDS if b.exact]

    @pytest.mark.slow
    @pytest.mark.parametrize("bound", exact, ids=[b.name for b in exact])
    def slow(bound):
        test(bound, full=True)

    slow.__name__ = test.__name__ + "_full_grid"
    return slow


@pytest.mark.parametrize("bound", BOUNDS, ids=NAMES)
def test_float_agrees_with_mpmath_and_certified_contains_it(bound, full=False):
    checked = 0
    for pt, eps in _cases(bound, full):
        d_mp = _dev_or_none(bound, pt, eps)
        if d_mp is None:
            continue
        checked += 1
        d_np = bound.deviation(eps, **pt)
        assert _rel(d_np, d_mp) <= 1e-12, (bound.name, pt, eps, d_np, d_mp)
        enc = bound.deviation_certified(eps, **pt)
        assert enc.contains(d_mp), (bound.name, pt, eps, enc, d_mp)
        d = float(d_mp)
        if not bound.deviation_parameter.domain.contains(d):
            continue
        f_mp = bound.failure_probability_mp(d, dps=50, **pt)
        f_np = bound.failure_probability(d, **pt)
        assert _rel(f_np, f_mp) <= 1e-12, (bound.name, pt, eps, f_np, f_mp)
        enc = bound.failure_probability_certified(d, **pt)
        assert enc.contains(f_mp), (bound.name, pt, eps, enc, f_mp)
    assert checked >= len(_cases(bound, full)) // len(EPS_GRID), f"{bound.name}: too few reachable cases ({checked})"


test_float_agrees_with_mpmath_and_certified_contains_it_full_grid = _full_cases(
    test_float_agrees_with_mpmath_and_certified_contains_it)


# ---- inverse round trip ----------------------------------------------------------------------------
@pytest.mark.parametrize("bound", BOUNDS, ids=NAMES)
def test_inverse_round_trip(bound, full=False):
    for pt, eps in _cases(bound, full):
        if _dev_or_none(bound, pt, eps) is None:
            continue
        d = bound.deviation(eps, **pt)
        f = bound.failure_probability(d, **pt)
        if not bound.exact:
            assert _rel(f, eps) <= 1e-10, (bound.name, pt, eps, d, f)
        else:
            # Generalised inverse d(eps) = min{d : F(d) <= eps}: valid (F(d) <= eps) and attained, so the
            # level F(d) itself (rounded up a little) maps back to the same deviation.
            assert f <= eps * (1 + 1e-10), (bound.name, pt, eps, d, f)
            back = bound.deviation(min(eps, f * (1 + 1e-9)), **pt) if f > 0 else d
            assert abs(back - d) <= 1e-9 * abs(d) + 1e-15, (bound.name, pt, eps, d, back)


test_inverse_round_trip_full_grid = _full_cases(test_inverse_round_trip)


# ---- monotonicity (hypothesis) -------------------------------------------------------------------
def _point_strategy(bound):
    parts = {}
    for p in bound.parameters:
        lo, hi = (float(v) for v in p.typical)
        if lo > 0 and hi > 0:
            s = st.floats(math.log10(lo), math.log10(hi)).map(lambda e: 10.0 ** e)
        else:
            s = st.floats(lo, hi)
        if p.domain.integer:
            s = s.map(lambda v: int(round(v)))
        parts[p.name] = s
    return st.fixed_dictionaries(parts)


@pytest.mark.parametrize("bound", BOUNDS, ids=NAMES)
def test_deviation_decreases_with_eps(bound):
    @HYP
    @given(pt=_point_strategy(bound), e1=st.floats(-30, -2), gap=st.floats(0.01, 10))
    def check(pt, e1, gap):
        assume(_valid(bound, pt))
        small, large = 10.0 ** (e1 - gap), 10.0 ** e1
        assume(_dev_or_none(bound, pt, small) is not None)
        d_small, d_large = bound.deviation(small, **pt), bound.deviation(large, **pt)
        if bound.exact:
            assert d_small >= d_large - 1e-12 * abs(d_large)
        else:
            assert d_small > d_large

    check()


@pytest.mark.parametrize("bound", [b for b in BOUNDS if b.size_parameters], ids=[b.name for b in BOUNDS
                                                                                   if b.size_parameters])
def test_deviation_non_increasing_in_sample_size(bound):
    @HYP
    @given(pt=_point_strategy(bound), e=st.floats(-30, -2), which=st.sampled_from(bound.size_parameters),
           factor=st.floats(1.001, 100))
    def check(pt, e, which, factor):
        eps = 10.0 ** e
        bigger = dict(pt)
        grown = pt[which] * factor
        bigger[which] = int(math.ceil(grown)) if bound.parameter(which).domain.integer else grown
        assume(_valid(bound, pt) and _valid(bound, bigger))
        assume(_dev_or_none(bound, pt, eps) is not None and _dev_or_none(bound, bigger, eps) is not None)
        d0, d1 = bound.deviation(eps, **pt), bound.deviation(eps, **bigger)
        assert d1 <= d0 * (1 + 1e-12) + 1e-300, (pt, bigger, eps, d0, d1)

    check()


def test_size_parameters_are_declared_parameters():
    for b in BOUNDS:
        assert set(b.size_parameters) <= {p.name for p in b.parameters}, b.name


# ---- domain errors -----------------------------------------------------------------------------------
BAD_EPS = [0, 1, -1, 0.0, 1.0, float("nan"), float("inf"), "0.1", True]


def _assert_names(exc, field, value):
    msg = str(exc.value)
    assert field in msg and repr(value) in msg, msg


@pytest.mark.parametrize("bound", BOUNDS, ids=NAMES)
@pytest.mark.parametrize("bad", BAD_EPS, ids=repr)
def test_bad_eps_is_rejected(bound, bad):
    pt = grid(bound)[0]
    for method in (bound.deviation, bound.deviation_mp, bound.deviation_certified):
        with pytest.raises(InputError) as exc:
            method(bad, **pt)
        _assert_names(exc, "eps", bad)


def _bad_values(p, size: bool):
    dom = p.domain
    vals = [float("nan"), float("inf"), "3", True]
    if math.isfinite(dom.lower):
        vals.append(dom.lower - 1)
        if dom.lower_open:
            vals.append(dom.lower)
    if dom.integer:
        vals.append(max(dom.lower, 0) + 2.5)
    if size:
        vals += [0, -3, float("nan")] + ([2.5] if dom.integer else [])
    return vals


def _param_cases():
    out = []
    for b in BOUNDS:
        for p in b.parameters:
            for v in _bad_values(p, p.name in b.size_parameters):
                out.append(pytest.param(b, p.name, v, id=f"{b.name}-{p.name}-{v!r}"))
    return out


@pytest.mark.parametrize("bound, name, bad", _param_cases())
def test_bad_parameter_is_rejected(bound, name, bad):
    pt = dict(grid(bound)[0])
    pt[name] = bad
    with pytest.raises(InputError) as exc:
        bound.deviation(1e-6, **pt)
    _assert_names(exc, name, bad)
    with pytest.raises(InputError):
        bound.failure_probability_mp(0.5, **pt)


@pytest.mark.parametrize("bound", BOUNDS, ids=NAMES)
def test_unknown_and_missing_parameters_are_rejected(bound):
    pt = grid(bound)[0]
    with pytest.raises(InputError) as exc:
        bound.deviation(1e-6, **pt, not_a_parameter=1)
    assert "not_a_parameter" in str(exc.value)
    first = bound.parameters[0].name
    rest = {k: v for k, v in pt.items() if k != first}
    with pytest.raises(InputError) as exc:
        bound.deviation(1e-6, **rest)
    assert first in str(exc.value)


@pytest.mark.parametrize("bound", BOUNDS, ids=NAMES)
def test_bad_deviation_is_rejected(bound):
    pt = grid(bound)[0]
    name = bound.deviation_parameter.name
    for bad in (float("nan"), float("inf"), "0.1", True):
        with pytest.raises(InputError) as exc:
            bound.failure_probability(bad, **pt)
        _assert_names(exc, name, bad)


# ---- registry and proof notes --------------------------------------------------------------------------
def _bound_modules():
    return sorted(m.name for m in pkgutil.iter_modules(fb.__path__) if not m.name.startswith("_"))


def test_every_module_registers_a_bound():
    registered = fb.all_bounds()
    for name in _bound_modules():
        mod = importlib.import_module(f"finitekey.bounds.{name}")
        attrs = {id(v) for v in vars(mod).values()}
        mine = [b for b in registered if id(b) in attrs or type(b).__module__ == mod.__name__]
        assert mine, f"finitekey/bounds/{name}.py registers no bound"


def test_every_registered_bound_belongs_to_a_module():
    owners = {}
    for name in _bound_modules():
        mod = importlib.import_module(f"finitekey.bounds.{name}")
        for b in fb.all_bounds():
            if id(b) in {id(v) for v in vars(mod).values()} or type(b).__module__ == mod.__name__:
                owners.setdefault(b.name, name)
    assert set(owners) == set(NAMES)


def test_package_import_registers_every_module():
    # A fresh interpreter, so that imports done by other tests cannot hide a missing line in __init__.py.
    code = ("import sys, finitekey.bounds; print(' '.join(sorted(m.split('.')[-1] for m in sys.modules "
            "if m.startswith('finitekey.bounds.'))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT)
    imported = set(out.stdout.split())
    missing = set(_bound_modules()) - imported
    assert not missing, f"not imported by finitekey/bounds/__init__.py: {sorted(missing)}"


@pytest.mark.parametrize("module", _bound_modules())
def test_every_module_has_a_proof_note(module):
    note = ROOT / "proofs_notes" / "bounds" / f"{module}.md"
    assert note.is_file(), f"missing {note.relative_to(ROOT)}"
    assert note.read_text().strip(), f"empty {note.relative_to(ROOT)}"


@pytest.mark.parametrize("bound", BOUNDS, ids=NAMES)
def test_describe_and_latex(bound):
    info = bound.describe()
    assert info["name"] == bound.name and info["references"], bound.name
    assert set(bound.latex()) == {"failure_probability", "deviation"}
