"""``finitekey design [SCENARIO.toml]`` -- choose the free parameters (basis bias, test fraction, epsilon split).

Without a file the built-in scenario of the default protocol is used (a fictional link of our own).
``--reach`` asks the protocol for its maximal distance (link scenarios, decoy-bb84).
"""

from __future__ import annotations

import argparse
from types import SimpleNamespace

from .. import protocols
from ..errors import InputError
from ..files import read_toml
from ..optimize.dispatch import scenario_from_dict
from .keylength_cmd import render_ledger, statistics_help
from .render import caution_block, fmt, json_document, table, to_json

__all__ = ["COMMAND", "load_scenario", "render_design", "render_reach", "status_line"]


def load_scenario(path):
    """Return ``(protocol, scenario)`` from a TOML file, or the default protocol's built-in scenario."""
    if path is None:
        proto = protocols.get(protocols.DEFAULT_PROTOCOL)
        return proto, proto.default_scenario()
    return scenario_from_dict(read_toml(path))


def _args(p: argparse.ArgumentParser) -> None:
    p.add_argument("scenario", nargs="?", default=None, help="scenario file (TOML); default: built-in scenario")
    p.add_argument("--statistics", default=None, help=statistics_help(design=True))
    p.add_argument("--reach", action="store_true", help="report the maximal distance (link scenarios only)")
    p.add_argument("--json", action="store_true", help="machine-readable output")


def _value(v):
    if isinstance(v, dict):
        return ", ".join(f"{k}={_value(x)}" for k, x in v.items())
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, float) and not v.is_integer() and 1e-3 <= abs(v) < 1e5:
        return f"{v:.4g}"
    return fmt(v)


#: Optimiser diagnostics (DesignResult.diagnostics) shown in the text output, with label and unit.
_DIAGNOSTICS = {"float_objective_bits": ("optimiser objective (float estimate)", "bits per block")}


def render_scenario(scenario: dict) -> str:
    """One line per scenario section: ``[section] field=value, ...``."""
    lines = []
    for section, fields in scenario.items():
        if isinstance(fields, dict):
            lines.append(f"  [{section}] " + ", ".join(f"{k}={_value(v)}" for k, v in fields.items()))
    return "\n".join(lines)


def status_line(status) -> str:
    """``Status: key`` or ``Status: NO KEY -- reason; detail`` (one line)."""
    if status.key:
        return "Status: key" + (f" ({status.detail})" if status.detail else "")
    return "Status: NO KEY -- " + status.text().removeprefix("no key: ")


def render_design(d, source: str | None = None) -> str:
    """Text of a design: scenario echo, status, chosen parameters (only when there is a key), rates, ledger.

    ``source`` names the scenario file; None means the built-in default scenario.
    """
    head = [f"Scenario ({source or 'built-in default scenario'}):", render_scenario(d.scenario), ""] \
        if getattr(d, "scenario", None) else []
    head.append(status_line(d.status))
    rows = []
    if d.status.key:
        for k, v in d.parameters.items():  # a nested mapping (e.g. the epsilon split) gets one row per entry
            items = v.items() if isinstance(v, dict) else [(None, v)]
            rows += [["parameter: " + k + ("" if sub is None else "." + sub), _value(x), ""] for sub, x in items]
        rows += [["expected: " + k, _value(v), _expected_unit(k)] for k, v in d.expected_counts.items()]
    else:
        head.append("No parameters are chosen: the search found none that gives a key (the last point tried is "
                    "in the --json output under parameters_tried).")
    rows.append(["secret key length", d.expected.secret_key_length, "bits per block"])
    if d.secret_key_rate_per_signal is not None:
        rows.append(["secret key rate", fmt(d.secret_key_rate_per_signal), "bits per signal"])
    if getattr(d, "secret_key_rate_per_detection", None) is not None:
        rows.append(["secret key rate", fmt(d.secret_key_rate_per_detection), "bits per detection"])
    if getattr(d, "asymptotic_rate_per_detection", None) is not None:
        rows.append(["asymptotic rate", fmt(d.asymptotic_rate_per_detection), "bits per detection"])
    if d.secret_key_rate_bps is not None:
        rows.append(["secret key rate", fmt(d.secret_key_rate_bps), "bits per second"])
    if d.block_fill_time_s is not None:
        rows.append(["block fill time", fmt(d.block_fill_time_s), "s"])
    for k, (label, unit) in _DIAGNOSTICS.items():
        if k in d.diagnostics:
            rows.append([label, fmt(d.diagnostics[k]), unit])
    title = f"Design ({d.protocol}, statistics {d.expected.statistics})" if d.status.key else \
        f"No key ({d.protocol}, statistics {d.expected.statistics})"
    notes = ["", *("Note: " + n for n in getattr(d, "notes", ()))] if getattr(d, "notes", ()) else []
    notes += ["", *("warning: " + w for w in d.warnings)] if d.warnings else []
    return "\n".join(head + [title, table(rows, ["quantity", "value", "unit"])] + notes
                     + ["", "Epsilon ledger:", render_ledger(d.expected.ledger)])


def render_reach(r) -> str:
    """Text of a :class:`~finitekey.protocols.ReachResult`: the distance only when the search found one."""
    if r.reach_km is not None:
        reach = f"{r.reach_km:.6g} km"
    elif r.limit_reached:
        reach = f"not found: key at the search limit {r.search_limit_km:g} km, the reach lies beyond it"
    else:
        reach = "none: no key even at 0 km"
    rows = [["reach", reach], ["status", r.status.text()], ["statistics", r.statistics],
            ["tolerance", f"{r.tolerance_km:g} km"], ["search limit", f"{r.search_limit_km:g} km"]]
    d = r.to_dict()
    label = "at the search limit" if r.limit_reached else "at the reach"
    for k, v in d.items():
        if k.endswith("_at_reach"):
            rows.append([k.removesuffix("_at_reach").replace("_", " ") + " " + label, _value(v)])
    return table(rows, ["quantity", "value"])


def _expected_unit(key: str) -> str:
    """Unit of an expected quantity of a design, from its name: bits, fraction or count."""
    if key.endswith("_bits"):
        return "bits"
    return "fraction" if key.endswith(("qber", "fraction")) else "count"


def _run(args) -> int:
    proto, sc = load_scenario(args.scenario)
    if args.reach:
        reach = getattr(proto, "reach", None)
        if reach is None:
            with_reach = [n for n in protocols.names() if getattr(protocols.get(n), "reach", None) is not None]
            raise InputError("--reach", proto.name,
                             f"a link scenario ({', '.join(with_reach)}); this protocol has no reach")
        out = reach(sc, args.statistics)
        if args.json:
            print(to_json(json_document(out.to_dict())))
        else:
            print(render_reach(out))
            print("\n" + caution_block())
        return 0
    d = proto.design(sc, args.statistics)
    if args.json:
        print(to_json(json_document(d.to_dict())))
        return 0
    print(render_design(d, args.scenario))
    print("\n" + caution_block())
    return 0


COMMAND = SimpleNamespace(NAME="design", add_arguments=_args, run=_run)
