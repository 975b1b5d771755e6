"""A protocol described by its states and measurements (``described``): numerical, certified, finite size.

The user describes the protocol in a file (signal states, POVMs, announcements and key map, statistics);
:mod:`.description` validates it and builds the key-rate problem; :mod:`.analysis` turns an observed block
into a certified key length (collective attacks; proofs_notes/protocols/described.md); :mod:`.scenario` and
:mod:`.design` give designs and block sizes.  The solver is :mod:`finitekey.numerical.solver`.
"""

from __future__ import annotations

from ..._threads import with_one_blas_thread
from .._registry import register
from .._spec import protocol_schema, table_rows
from . import analysis, block, description, design, scenario
from .analysis import key_length, key_length_batch, term_specs
from .block import BLOCK_SCHEMA_RULES, BLOCK_SPECS, PROTOCOL_NAME, DescribedBlock, parse_block
from .description import Description, parse_description
from .scenario import SCENARIO_SCHEMA_RULES, SCENARIO_SPECS, DescribedScenario, parse_scenario, scenario_fields, with_field

__all__ = ["Described", "DESCRIBED_PROTOCOL", "PROTOCOL_NAME", "DescribedBlock", "DescribedScenario", "Description",
           "parse_block", "parse_scenario", "parse_description", "key_length", "key_length_batch", "term_specs",
           "analysis", "block", "description", "design", "scenario"]


class Described:
    """The registered protocol object of a described protocol (see the protocol interface)."""

    name = PROTOCOL_NAME
    statistics_methods = ("exact",)
    default_statistics = "exact"

    parse_block = staticmethod(parse_block)
    parse_scenario = staticmethod(parse_scenario)
    scenario_fields = staticmethod(scenario_fields)
    with_field = staticmethod(with_field)
    block_specs = BLOCK_SPECS
    scenario_specs = SCENARIO_SPECS

    @staticmethod
    def asymptotic_rate(scenario):
        """Key per round of an infinite block (see :func:`.design.asymptotic_rate`)."""
        return design.asymptotic_rate(scenario)

    @staticmethod
    def key_length(block, statistics=None):
        """:func:`.analysis.key_length` (see there for the parameters)."""
        return key_length(block, statistics)

    @staticmethod
    def key_length_batch(blocks, statistics=None, jobs: int = 1):
        """:func:`.analysis.key_length_batch` (see there for the parameters)."""
        return key_length_batch(blocks, statistics, jobs=jobs)

    @staticmethod
    @with_one_blas_thread
    def design(scenario, statistics=None, **options):
        """:func:`.design.design` with one BLAS thread (see there for the parameters)."""
        return design.design(scenario, statistics, **options)

    @staticmethod
    @with_one_blas_thread
    def blocksize(scenario, target, statistics=None, **options):
        """:func:`.design.blocksize` with one BLAS thread (see there for the parameters)."""
        return design.blocksize(scenario, target, statistics, **options)

    @staticmethod
    def fields_table() -> dict:
        """Every scenario and block field: ``{"scenario": rows, "block": rows}``.

        Returns
        -------
        dict
        """
        return {"scenario": table_rows(SCENARIO_SPECS), "block": table_rows(BLOCK_SPECS)}

    @staticmethod
    def json_schema(kind: str) -> dict:
        """JSON Schema (draft 2020-12) of a ``"block"`` or a ``"scenario"``, from the field declarations.

        Returns
        -------
        dict
        """
        return protocol_schema(PROTOCOL_NAME, kind, BLOCK_SPECS, SCENARIO_SPECS, BLOCK_SCHEMA_RULES,
                               SCENARIO_SCHEMA_RULES)

    @staticmethod
    def default_scenario():
        """The built-in scenario: qubit BB84 as a described protocol (fictional numbers).

        Returns
        -------
        DescribedScenario
        """
        return scenario.default_scenario()


DESCRIBED_PROTOCOL = register(Described())
