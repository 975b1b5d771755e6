"""Decoy-state BB84 with phase-randomised weak coherent pulses: finite-key length, design and reach.

Alice sends pulses of mean photon number ``mu_k`` (descending, chosen with probability ``p_k``) in basis X
(key) or Z (test), each side choosing X with probability ``q_X``.  From the detections and errors seen per
intensity in each basis, the analysis bounds

* ``s0``, ``s1``: the vacuum and single-photon detections in the key basis (lower bounds),
* ``v1``: the single-photon errors in the test basis (upper bound), and ``s1Z`` (lower),
* ``phi``: the phase-error rate of the single-photon key bits (upper bound, by random sampling),

and extracts

.. math:: \\ell = \\Big\\lfloor s_0 + s_1\\,(1 - h(\\phi)) - \\lambda_{EC} - 2\\log_2\\tfrac{2}{\\varepsilon_{ch}^2}
          - 2\\log_2\\tfrac{1}{2\\varepsilon_{PA}} - \\log_2\\tfrac{2}{\\varepsilon_{cor}}\\Big\\rfloor ,

with ``phi`` bounding the single-photon phase-error rate except with probability ``eps_1^2`` (``eps_1`` the
single-photon smoothing parameter).  With every epsilon equal to ``eps_sec/21`` (12 count intervals, 4 units
for the single-photon smoothing doubled by the chain rule, 2 + 2 for the chain rules, 1 for hashing) this is
the 2014 formula ``s0 + s1 (1 - h(phi)) - leak - 6 log2(21/eps_sec) - log2(2/eps_cor)``.

Statistics (``statistics=``):

* ``"exact"`` (default): exact binomial (Clopper-Pearson) intervals on the counts per intensity, valid for
  non-identical Bernoulli trials by Hoeffding's 1956 domination, and a Chernoff-Hoeffding bound on the
  phase errors that is monotone in the single-photon counts (so their bounds may be plugged in; the exact
  hypergeometric bound is not), with an optimisable epsilon split;
* ``"chernoff"``: multiplicative Chernoff intervals on the counts, the same phase-error bound;
* ``"hoeffding"``: the 2014 reference: Hoeffding intervals ``n_k -/+ sqrt(n/2 ln(21/eps_sec))``, every
  epsilon ``eps_sec/21``, and the phase-error term ``max(gamma_2014, mu)``: the 2014 sampling term
  ``gamma`` is not a valid bound on its own (it tends to 0 with the test error rate), so it is kept only
  where it exceeds the rigorous random-sampling (Serfling) deviation ``mu`` at the same epsilon.
* ``"kato"``: Kato's inequality over all ``pulses`` of the block (dependent rounds): intervals on sums of
  conditional probabilities, tilts from the pre-registered ``kato_expected`` (``a = 0``, Azuma-Hoeffding,
  without it), four more events converting the decoy bounds to actual counts; closed forms only, no design.

Analyses by intensity count: 3 intensities with ``mu1 > mu2 + mu3`` use the closed form of Lim et al.;
2 intensities the one-decoy closed form of Rusca et al. (vacuum bounded from error counts); any other count
(or 3 intensities violating the condition) the certified linear programme of the decoy engine
(:func:`finitekey.decoy.bound`).

See proofs_notes/protocols/decoy_bb84.md for the derivation, the epsilon accounting and the assumptions.

References
----------
.. [1] C. C. W. Lim, M. Curty, N. Walenta, F. Xu, H. Zbinden, "Concise security bounds for practical
   decoy-state quantum key distribution", Phys. Rev. A 89, 022307 (2014).
.. [2] D. Rusca, A. Boaron, F. Grünenfelder, A. Martin, H. Zbinden, "Finite-key analysis for the 1-decoy
   state QKD protocol", Appl. Phys. Lett. 112, 171104 (2018).
.. [3] X. Ma, B. Qi, Y. Zhao, H.-K. Lo, "Practical decoy state for quantum key distribution",
   Phys. Rev. A 72, 012326 (2005).
.. [4] W. Hoeffding, "On the distribution of the number of successes in independent trials",
   Ann. Math. Statist. 27, 713-721 (1956).
.. [5] H.-K. Lo, X. Ma, K. Chen, "Decoy state quantum key distribution", Phys. Rev. Lett. 94, 230504 (2005).
.. [6] G. Kato, "Concentration inequality using unconfirmed knowledge", arXiv:2002.04357 (2020).

The package has one module per part of the protocol (the same shape for every protocol):
:mod:`.block` (the observed block, the acceptance test and their fields), :mod:`.analysis` (ledger, certified
estimates and key length), :mod:`.scenario` (link and device fields, default warnings, asymptotic rates) and
:mod:`.design` (intensities, probabilities, basis bias and epsilon split; block size; reach).  This module
holds the registered protocol object and re-exports the public names.
"""

from __future__ import annotations

from dataclasses import replace

from ..._threads import with_one_blas_thread
from .._registry import register
from .._result import BlockTarget, DesignResult, KeyLengthResult, ReachResult
from .._spec import protocol_schema, table_rows
from . import design
from .analysis import (ASSUMPTIONS, BLOCK_RULE_ASSUMPTION, CHAIN_RULES, DEFAULT_STATISTICS, DESIGN_STATISTICS,
                       EC_FAILURE_TERM, FIXED_LENGTH_ASSUMPTION, FORMULA, KATO_ASSUMPTION, KATO_CONVERSIONS,
                       KATO_REFERENCE, MAX_EXACT_TRIALS, REFERENCE_UNITS, REFERENCES, SINGLE_PHOTON_APPEARANCES,
                       STATISTICS, VARIABLE_LENGTH_ASSUMPTION, _check_design_statistics, analysis_kind, block_ledger,
                       count_events, key_length, key_length_batch, reference_ledger, term_specs,
                       three_intensity_condition)
from .block import (_BLOCK_SCHEMA_RULES, ACCEPTANCE_STATISTICS, BLOCK_SPECS, PROTOCOL_NAME, SECRECY_TERMS,
                    AcceptanceTest, DecoyBlock, parse_block)
from .scenario import (_SCENARIO_SCHEMA_RULES, BLOCK_UNITS, DEFAULT_WARNINGS, SCENARIO_SPECS, DecoyScenario,
                       default_scenario, default_warnings, gllp_rate, optimal_gllp_rate, parse_scenario,
                       scenario_fields, with_field)

#: The protocol object, and the public names of the modules re-exported (``decoy_bb84.key_length(...)``); the
#: design functions are reached through the protocol object or :mod:`.design`.
__all__ = ["DecoyBB84", "DECOY_BB84", "PROTOCOL_NAME", "SECRECY_TERMS", "DecoyBlock", "ACCEPTANCE_STATISTICS",
           "AcceptanceTest", "BLOCK_SPECS", "parse_block", "STATISTICS", "DESIGN_STATISTICS", "DEFAULT_STATISTICS",
           "KATO_CONVERSIONS", "REFERENCE_UNITS", "FORMULA", "REFERENCES", "BLOCK_RULE_ASSUMPTION",
           "VARIABLE_LENGTH_ASSUMPTION", "ASSUMPTIONS", "KATO_REFERENCE", "KATO_ASSUMPTION",
           "FIXED_LENGTH_ASSUMPTION", "MAX_EXACT_TRIALS", "EC_FAILURE_TERM", "SINGLE_PHOTON_APPEARANCES",
           "CHAIN_RULES", "three_intensity_condition", "count_events", "term_specs", "reference_ledger",
           "analysis_kind", "block_ledger", "key_length", "key_length_batch", "gllp_rate", "optimal_gllp_rate",
           "BLOCK_UNITS", "SCENARIO_SPECS", "DEFAULT_WARNINGS", "default_warnings", "DecoyScenario",
           "parse_scenario", "default_scenario", "scenario_fields", "with_field"]


# ---------------------------------------------------------------------------------------------------------
# the protocol object
# ---------------------------------------------------------------------------------------------------------
class DecoyBB84:
    """The registered ``decoy-bb84`` protocol object (see the package docstring)."""

    name = PROTOCOL_NAME
    statistics_methods = STATISTICS
    design_statistics = DESIGN_STATISTICS
    default_statistics = DEFAULT_STATISTICS

    def parse_block(self, data: dict) -> DecoyBlock:
        """:func:`parse_block`: validate one observed block mapping (errors name the field)."""
        return parse_block(data)

    def key_length(self, block: DecoyBlock, statistics: str | None = None) -> KeyLengthResult:
        """:func:`key_length`: certified secret key length of one block (see there for the parameters)."""
        return key_length(block, statistics)

    def key_length_batch(self, blocks, statistics: str | None = None, jobs: int = 1) -> list:
        """:func:`key_length_batch`: key lengths of many blocks, identical to :meth:`key_length` block by block."""
        return key_length_batch(blocks, statistics, jobs=jobs)

    def parse_scenario(self, data: dict) -> DecoyScenario:
        """:func:`parse_scenario`: validate a scenario mapping (the parsed TOML)."""
        return parse_scenario(data)

    def default_scenario(self) -> DecoyScenario:
        """:func:`default_scenario`: the built-in fictional metro link."""
        return default_scenario()

    # The entry points for callers run with one BLAS thread (restored afterwards); see finitekey/_threads.py.
    @with_one_blas_thread
    def design(self, scenario: DecoyScenario, statistics: str | None = None) -> DesignResult:
        """Choose intensities, their probabilities, the basis bias and the epsilon split for ``scenario``.

        Parameters
        ----------
        scenario : DecoyScenario
        statistics : str, optional
            Statistics method (default: the scenario's, else the protocol's).

        Returns
        -------
        DesignResult
            See :func:`finitekey.protocols.decoy_bb84.design.design`; runs with one BLAS thread.
        """
        result = design.design(scenario, _check_design_statistics(statistics))
        warnings = default_warnings(scenario, result) if isinstance(result, DesignResult) else ()
        return replace(result, warnings=warnings) if warnings else result

    @with_one_blas_thread
    def blocksize(self, scenario: DecoyScenario, target: BlockTarget, statistics: str | None = None,
                  unit: str | None = None):
        """Smallest block whose design reaches ``target``.

        Parameters
        ----------
        scenario : DecoyScenario
        target : BlockTarget
        statistics : str, optional
        unit : str, optional
            ``"pulses"`` or ``"key_detections"`` (``"key-detections"``); default: the scenario's unit.

        Returns
        -------
        BlockSizeResult
            See :func:`finitekey.protocols.decoy_bb84.design.blocksize`; runs with one BLAS thread.
        """
        return design.blocksize(scenario, target, _check_design_statistics(statistics), unit=unit)

    @with_one_blas_thread
    def reach(self, scenario: DecoyScenario, statistics: str | None = None) -> ReachResult:
        """Largest fibre length with a positive certified key for ``scenario``'s block size.

        Parameters
        ----------
        scenario : DecoyScenario
        statistics : str, optional

        Returns
        -------
        ReachResult
            See :func:`finitekey.protocols.decoy_bb84.design.reach`; runs with one BLAS thread.
        """
        return design.reach(scenario, _check_design_statistics(statistics))

    block_specs = BLOCK_SPECS
    scenario_specs = SCENARIO_SPECS

    def fields_table(self) -> dict:
        """Every scenario and block field: ``{"scenario": rows, "block": rows}`` (see :func:`._spec.table_rows`).

        Returns
        -------
        dict
        """
        return {"scenario": table_rows(SCENARIO_SPECS), "block": table_rows(BLOCK_SPECS)}

    def json_schema(self, kind: str) -> dict:
        """JSON Schema (draft 2020-12) of a ``"block"`` or a ``"scenario"``, from the field declarations.

        Returns
        -------
        dict
        """
        return protocol_schema(PROTOCOL_NAME, kind, BLOCK_SPECS, SCENARIO_SPECS, _BLOCK_SCHEMA_RULES,
                               _SCENARIO_SCHEMA_RULES)

    def scenario_fields(self) -> list:
        """:func:`scenario_fields`: the dotted scenario fields a sweep may vary."""
        return scenario_fields()

    def with_field(self, scenario: DecoyScenario, dotted_name: str, value) -> DecoyScenario:
        """:func:`with_field`: a copy of ``scenario`` with one dotted field changed (validated)."""
        return with_field(scenario, dotted_name, value)


DECOY_BB84 = register(DecoyBB84())
