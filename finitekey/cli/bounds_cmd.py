"""``finitekey bounds`` (list the registered bounds) and ``finitekey bound NAME`` (evaluate one)."""

from __future__ import annotations

import argparse

import mpmath
from types import SimpleNamespace

from .. import bounds
from ..domains import DPS
from ..errors import InputError
from .options import domain_option, number
from .render import caution_block, fmt, json_document, table, to_json


def _list_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("--json", action="store_true", help="machine-readable output")


def _list_run(args) -> int:
    items = [b.describe() for b in bounds.all_bounds()]
    if args.json:
        print(to_json(json_document({"bounds": items})))
        return 0
    print(table([[d["name"], "exact" if d["exact"] else "bound", d["title"]] for d in items],
                ["name", "kind", "title"]))
    print("\nEvaluate one with: finitekey bound NAME --eps EPS PARAM=VALUE ...  (finitekey bound NAME --help-params)")
    print("\n" + caution_block())
    return 0


def _eval_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("name", help="bound name, as listed by 'finitekey bounds'")
    p.add_argument("assignments", nargs="*", metavar="PARAM=VALUE", help="bound parameters, e.g. n=1e6")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--eps", type=str, help="failure probability: print the deviation it guarantees")
    g.add_argument("--deviation", type=str, help="deviation: print its failure probability")
    p.add_argument("--certified", action="store_true", help="also print a certified (ball-arithmetic) enclosure")
    p.add_argument("--dps", type=domain_option("--dps", DPS), default=None,
                   help=f"also evaluate with mpmath at this many decimal digits ({DPS.describe()})")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.add_argument("--help-params", action="store_true", help="list the bound's parameters and exit")


_number = number


def _eval_run(args) -> int:
    b = bounds.get(args.name)
    if args.help_params:
        d = b.describe()
        print(f"{d['name']}: {d['title']}\n{d['summary']}\n")
        print(table([[q["name"], q["allowed"], q["description"]] for q in d["parameters"]],
                    ["parameter", "allowed", "meaning"]))
        return 0
    params = {}
    for a in args.assignments:
        if "=" not in a:
            raise InputError("PARAM=VALUE", a, "an assignment such as n=1000000")
        k, v = a.split("=", 1)
        k = k.strip()
        if k in params:
            raise InputError(k, a, f"each parameter given once ({k} = {params[k]!r} is given before)")
        params[k] = _number(k, v)
    if args.eps is None and args.deviation is None:
        raise InputError("--eps/--deviation", None, "one of --eps EPS or --deviation VALUE")
    out = {"bound": b.name, "parameters": params}
    if args.eps is not None:
        eps = _number("--eps", args.eps)
        out["eps"] = eps
        out["deviation"] = float(b.deviation(eps, **params))
        if args.dps is not None:
            out["deviation_mp"] = mpmath.nstr(b.deviation_mp(eps, dps=args.dps, **params), args.dps)
        if args.certified:
            enc = b.deviation_certified(eps, **params)
            out["deviation_certified"] = [enc.lo, enc.hi]
    else:
        dev = _number("--deviation", args.deviation)
        out["deviation"] = dev
        try:
            out["eps"] = float(b.failure_probability(dev, **params))
        except InputError as exc:  # the bound names its deviation parameter; the user typed --deviation
            if exc.field == b.deviation_parameter.name and exc.value == dev:
                raise InputError("--deviation", args.deviation, exc.allowed) from None
            raise
        if args.dps is not None:
            out["eps_mp"] = mpmath.nstr(b.failure_probability_mp(dev, dps=args.dps, **params), args.dps)
        if args.certified:
            enc = b.failure_probability_certified(dev, **params)
            out["eps_certified"] = [enc.lo, enc.hi]
    out["formula"] = b.latex()
    out["references"] = [str(r) for r in b.references]
    out["assumptions"] = list(b.assumptions)
    if args.json:
        print(to_json(json_document(out)))
        return 0
    print(f"{b.title}")
    rows = [[k, fmt(v)] for k, v in params.items()]
    for key in ("eps", "deviation", "deviation_mp", "eps_mp"):
        if key in out and key not in ("parameters",):
            rows.append([key, fmt(out[key]) if not isinstance(out[key], str) else out[key]])
    for key in ("deviation_certified", "eps_certified"):
        if key in out:
            rows.append([key, f"[{out[key][0]!r}, {out[key][1]!r}]"])
    print(table(rows, ["quantity", "value"]))
    print("\nFormula: " + out["formula"]["failure_probability"])
    print("Assumptions: " + "; ".join(out["assumptions"]))
    print("Source: " + "; ".join(out["references"]))
    print("\n" + caution_block())
    return 0


LIST = SimpleNamespace(NAME="bounds", add_arguments=_list_args, run=_list_run)
EVAL = SimpleNamespace(NAME="bound", add_arguments=_eval_args, run=_eval_run)
