"""Sending-or-not-sending twin-field QKD (``tf-sns``): link model, block format, certified key length, design.

Each window Alice and Bob independently choose a Z (key) window with probability ``p_Z`` or an X (decoy)
window.  In a Z window a side sends a phase-randomised pulse of intensity ``mu_z`` with probability
``epsilon`` (bit 1 for Alice, 0 for Bob) or nothing; in an X window it sends vacuum, ``mu_1`` or ``mu_2``
with a random phase announced afterwards.  The untrusted relay interferes the pulses and announces which
detector clicked.  Key bits come from Z windows; the untagged ones (exactly one side sent one photon) give
the key, with their phase errors bounded from the X1 windows (both sent ``mu_1`` with matching phases).

Modules: :mod:`.scenario` (link model, scenario), :mod:`.block` (block format), :mod:`.analysis`
(certified key length), :mod:`.design` (design, block size, reach).  Proof note:
``proofs_notes/protocols/tf_sns.md``.
"""

from __future__ import annotations

from ..._threads import with_one_blas_thread
from .._registry import register
from .._result import BlockTarget, DesignResult, KeyLengthResult, ReachResult
from .._spec import protocol_schema, table_rows
from .analysis import DEFAULT_STATISTICS, STATISTICS, key_length, key_length_batch, term_specs
from .block import BLOCK_SCHEMA_RULES, BLOCK_SPECS, TFBlock, parse_block
from .scenario import (PROTOCOL_NAME, SCENARIO_SCHEMA_RULES, SCENARIO_SPECS, TFScenario, default_scenario,
                       optimal_asymptotic_rate, parse_scenario, scenario_fields, with_field)

__all__ = ["TFSNS", "TF_SNS", "PROTOCOL_NAME", "TFBlock", "TFScenario", "parse_block", "parse_scenario",
           "key_length", "key_length_batch", "term_specs", "default_scenario"]


class TFSNS:
    """The registered ``tf-sns`` protocol object (see the package docstring)."""

    name = PROTOCOL_NAME
    statistics_methods = STATISTICS
    design_statistics = STATISTICS
    default_statistics = DEFAULT_STATISTICS
    block_specs = BLOCK_SPECS
    scenario_specs = SCENARIO_SPECS

    def parse_block(self, data: dict) -> TFBlock:
        """:func:`.block.parse_block`: validate one observed block mapping (errors name the field)."""
        return parse_block(data)

    def key_length(self, block: TFBlock, statistics: str | None = None) -> KeyLengthResult:
        """:func:`.analysis.key_length`: certified secret key length of one block."""
        return key_length(block, statistics)

    def key_length_batch(self, blocks, statistics: str | None = None, jobs: int = 1) -> list:
        """:func:`.analysis.key_length_batch`: key lengths of many blocks, block by block identical."""
        return key_length_batch(blocks, statistics, jobs=jobs)

    def parse_scenario(self, data: dict) -> TFScenario:
        """:func:`.scenario.parse_scenario`: validate a scenario mapping (the parsed TOML)."""
        return parse_scenario(data)

    def default_scenario(self) -> TFScenario:
        """:func:`.scenario.default_scenario`: the built-in fictional 300 km link."""
        return default_scenario()

    @with_one_blas_thread
    def design(self, scenario: TFScenario, statistics: str | None = None) -> DesignResult:
        """:func:`.design.design`: free parameters and the certified key of the expected block.

        Returns
        -------
        DesignResult
        """
        from . import design as _design
        return _design.design(scenario, statistics)

    @with_one_blas_thread
    def blocksize(self, scenario: TFScenario, target: BlockTarget, statistics: str | None = None,
                  unit: str | None = None):
        """:func:`.design.blocksize`: smallest number of windows reaching ``target``.

        Returns
        -------
        BlockSizeResult
        """
        from . import design as _design
        return _design.blocksize(scenario, target, statistics, unit=unit)

    @with_one_blas_thread
    def reach(self, scenario: TFScenario, statistics: str | None = None) -> ReachResult:
        """:func:`.design.reach`: largest total fibre length with a positive certified key.

        Returns
        -------
        ReachResult
        """
        from . import design as _design
        return _design.reach(scenario, statistics)

    def asymptotic_rate_per_pulse(self, scenario: TFScenario) -> float:
        """Asymptotic secret bits per window (infinite decoys, exact yields, ``p_Z -> 1``)."""
        return optimal_asymptotic_rate(scenario.link, scenario.ec_efficiency)[0]

    def fields_table(self) -> dict:
        """Every scenario and block field: ``{"scenario": rows, "block": rows}``."""
        return {"scenario": table_rows(SCENARIO_SPECS), "block": table_rows(BLOCK_SPECS)}

    def json_schema(self, kind: str) -> dict:
        """JSON Schema (draft 2020-12) of a ``"block"`` or a ``"scenario"``."""
        return protocol_schema(PROTOCOL_NAME, kind, BLOCK_SPECS, SCENARIO_SPECS, BLOCK_SCHEMA_RULES,
                               SCENARIO_SCHEMA_RULES)

    def scenario_fields(self) -> list:
        """:func:`.scenario.scenario_fields`: the dotted scenario fields a sweep may vary."""
        return scenario_fields()

    def with_field(self, scenario: TFScenario, dotted_name: str, value) -> TFScenario:
        """:func:`.scenario.with_field`: a copy of ``scenario`` with one dotted field changed (validated)."""
        return with_field(scenario, dotted_name, value)


TF_SNS = register(TFSNS())
