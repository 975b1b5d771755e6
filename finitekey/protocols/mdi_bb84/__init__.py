"""Measurement-device-independent BB84 (``mdi-bb84``): decoy-state MDI-QKD with an untrusted relay.

Alice and Bob each send phase-randomised weak coherent pulses (three or more intensities per side, BB84
states in Z and X) to a relay that announces Bell-state results; the key comes from the Z basis, the phase
errors of its single-photon pairs are bounded from the X basis.  The package has the shape of every
protocol here:

* :mod:`.scenario` -- the link model (two arms, relay detectors, encoding), scenario fields, asymptotic rate;
* :mod:`.block` -- the observed block (counts per intensity pair and basis);
* :mod:`.analysis` -- ledger and certified key length;
* :mod:`.design` -- design, block size and reach.

See proofs_notes/protocols/mdi_bb84.md.
"""

from __future__ import annotations

from ..._threads import with_one_blas_thread
from .._registry import register
from .._result import BlockTarget, DesignResult, KeyLengthResult, ReachResult
from .._spec import protocol_schema, table_rows
from .._fields import SECURITY_SCHEMA_RULE
from . import analysis, design
from .analysis import DEFAULT_STATISTICS, STATISTICS, key_length, key_length_batch, term_specs
from .block import BLOCK_SPECS, MdiBlock, parse_block
from .scenario import (PROTOCOL_NAME, SCENARIO_SCHEMA_RULES, SCENARIO_SPECS, MdiScenario, RelayModel,
                       asymptotic_rate, default_scenario, optimal_asymptotic_rate, parse_scenario, scenario_fields,
                       with_field)

__all__ = ["MdiBB84", "MDI_BB84", "PROTOCOL_NAME", "MdiBlock", "MdiScenario", "RelayModel", "parse_block",
           "parse_scenario", "default_scenario", "key_length", "key_length_batch", "term_specs",
           "asymptotic_rate", "optimal_asymptotic_rate", "STATISTICS"]


class MdiBB84:
    """The registered ``mdi-bb84`` protocol object (see the package docstring)."""

    name = PROTOCOL_NAME
    statistics_methods = STATISTICS
    design_statistics = STATISTICS
    default_statistics = DEFAULT_STATISTICS
    block_specs = BLOCK_SPECS
    scenario_specs = SCENARIO_SPECS

    def parse_block(self, data: dict) -> MdiBlock:
        """:func:`.block.parse_block`: validate one observed block mapping."""
        return parse_block(data)

    def key_length(self, block: MdiBlock, statistics: str | None = None) -> KeyLengthResult:
        """:func:`.analysis.key_length`: certified secret key length of one block."""
        return key_length(block, statistics)

    def key_length_batch(self, blocks, statistics: str | None = None, jobs: int = 1) -> list:
        """:func:`.analysis.key_length_batch`: key lengths of many blocks."""
        return key_length_batch(blocks, statistics, jobs=jobs)

    def parse_scenario(self, data: dict) -> MdiScenario:
        """:func:`.scenario.parse_scenario`: validate a scenario mapping."""
        return parse_scenario(data)

    def default_scenario(self) -> MdiScenario:
        """:func:`.scenario.default_scenario`: the built-in fictional link."""
        return default_scenario()

    @with_one_blas_thread
    def design(self, scenario: MdiScenario, statistics: str | None = None) -> DesignResult:
        """Choose per-side intensities and probabilities, the basis bias and the epsilon split.

        Returns
        -------
        DesignResult
            See :func:`.design.design`; runs with one BLAS thread.
        """
        return design.design(scenario, analysis.check_statistics(statistics))

    @with_one_blas_thread
    def blocksize(self, scenario: MdiScenario, target: BlockTarget, statistics: str | None = None,
                  unit: str | None = None):
        """Smallest block (pulse pairs) whose design reaches ``target``.

        Returns
        -------
        BlockSizeResult
            See :func:`.design.blocksize`.
        """
        return design.blocksize(scenario, target, analysis.check_statistics(statistics), unit=unit)

    @with_one_blas_thread
    def reach(self, scenario: MdiScenario, statistics: str | None = None) -> ReachResult:
        """Largest Alice-Bob fibre length with a positive certified key (relay at the scenario's fraction).

        Returns
        -------
        ReachResult
            See :func:`.design.reach`.
        """
        return design.reach(scenario, analysis.check_statistics(statistics))

    def asymptotic_rate_per_pulse(self, scenario: MdiScenario) -> float:
        """Infinite-decoy asymptotic rate per pulse pair with no sifting loss, optimised over the signals.

        Returns
        -------
        float
        """
        return optimal_asymptotic_rate(scenario.model, scenario.ec_efficiency)[0]

    def fields_table(self) -> dict:
        """Every scenario and block field: ``{"scenario": rows, "block": rows}``.

        Returns
        -------
        dict
        """
        return {"scenario": table_rows(SCENARIO_SPECS), "block": table_rows(BLOCK_SPECS)}

    def json_schema(self, kind: str) -> dict:
        """JSON Schema (draft 2020-12) of a ``"block"`` or a ``"scenario"``.

        Returns
        -------
        dict
        """
        return protocol_schema(PROTOCOL_NAME, kind, BLOCK_SPECS, SCENARIO_SPECS, {"": SECURITY_SCHEMA_RULE},
                               {**SCENARIO_SCHEMA_RULES, "security": SECURITY_SCHEMA_RULE})

    def scenario_fields(self) -> list:
        """:func:`.scenario.scenario_fields`: the dotted fields a sweep may vary."""
        return scenario_fields()

    def with_field(self, scenario: MdiScenario, dotted_name: str, value) -> MdiScenario:
        """:func:`.scenario.with_field`: a copy with one dotted field changed (validated)."""
        return with_field(scenario, dotted_name, value)


MDI_BB84 = register(MdiBB84())
