"""BB84 with a qubit source (or entanglement-based), biased basis choice: finite-key length of a block.

Protocol (as analysed in proofs_notes/protocols/bb84.md).  Alice and Bob each
choose basis X with probability ``p_X`` and Z with ``p_Z = 1 - p_X``.  Rounds
where both chose X give the raw key (``n = key_bits``); rounds where both chose
Z are all announced and compared (``k = test_bits``, ``e = test_errors``);
rounds with different bases are discarded, so sifting keeps ``p_X^2 + p_Z^2``
of the detected rounds (common practice, no source).  Bob corrects his key
with ``leak_EC`` bits of one-way reconciliation, the parties compare a
two-universal hash of ``ceil(log2(1/eps_cor))`` bits (error verification),
and privacy amplification by two-universal hashing extracts

.. math:: \\ell = \\Big\\lfloor n\\big(\\log_2\\tfrac1c - h(\\phi^{\\rm up})\\big)
          - \\mathrm{leak}_{EC} - \\lceil\\log_2\\tfrac1{\\varepsilon_{cor}}\\rceil
          - 2\\log_2\\tfrac1{2\\varepsilon_{PA}} \\Big\\rfloor

secret bits, where ``c`` is the overlap of the two measurements (1/2 for ideal
BB84) and :math:`\\phi^{\\rm up}` an upper bound on the phase-error rate of the key
bits that fails with probability at most :math:`\\varepsilon_s^2`, obtained from
the test bits by the selected statistics method:

* ``"exact"`` (default): the exact hypergeometric (Neyman) bound on the number
  of key-bit phase errors, certified (finitekey.bounds.hypergeometric_exact);
* ``"serfling"``: :math:`\\phi^{\\rm up} = e/k + \\mu` with the random-sampling
  (Serfling-type) deviation :math:`\\mu` (finitekey.bounds.random_sampling).

The analysis needs the block to be a number of rounds fixed before it, each round's bases chosen
independently with fixed probabilities and announced only after the block (block field ``closed_by``,
default ``"rounds"``): then, given ``n`` and ``k``, the test positions are a uniformly random subset of the
sifted rounds.  A block closed when key and test quotas fill is refused (Pfister et al. 2016, [6]_).

The protocol is :math:`\\varepsilon_{cor}`-correct and
:math:`(2\\varepsilon_s + \\varepsilon_{PA})`-secret.  The formula is composed
symbolically once from :mod:`finitekey.entropy` and the bound's sympy
deviation, compiled, evaluated in ball arithmetic, and the lower end of the
ball is rounded down.

References
----------
.. [1] M. Tomamichel, C. C. W. Lim, N. Gisin, R. Renner, "Tight finite-key
   analysis for quantum cryptography", Nat. Commun. 3, 634 (2012).
.. [2] M. Tomamichel and R. Renner, "Uncertainty relation for smooth entropies",
   Phys. Rev. Lett. 106, 110506 (2011).
.. [3] M. Tomamichel, C. Schaffner, A. Smith, R. Renner, "Leftover hashing
   against quantum side information", IEEE Trans. Inf. Theory 57, 5524 (2011).
.. [4] P. W. Shor and J. Preskill, "Simple proof of security of the BB84 quantum
   key distribution protocol", Phys. Rev. Lett. 85, 441 (2000).
.. [5] H.-K. Lo, H. F. Chau, M. Ardehali, "Efficient quantum key distribution
   scheme and a proof of its unconditional security", J. Cryptology 18, 133 (2005)
   -- the biased basis choice.
.. [6] C. Pfister, N. Lütkenhaus, S. Wehner, P. J. Coles, "Sifting attacks in finite-size quantum key
   distribution", New J. Phys. 18, 053001 (2016) -- why quota-closed blocks are refused.

The package has one module per part of the protocol (the same shape for every protocol):
:mod:`.block` (the observed block and its fields), :mod:`.analysis` (ledger and certified key length),
:mod:`.scenario` (scenario fields, expected counts, asymptotic rate) and :mod:`.design` (basis bias, epsilon
split, block size).  This module holds the registered protocol object and re-exports the public names.
"""

from __future__ import annotations

from ..._threads import with_one_blas_thread
from .._registry import register
from .._spec import protocol_schema, table_rows
from . import design
from .analysis import (ASSUMPTIONS, BLOCK_RULE_ASSUMPTION, FORMULA_LATEX, MODELLED_LEAKAGE_ASSUMPTION, REFERENCES,
                       block_ledger, key_length, key_length_batch, key_length_expr, min_entropy_expr,
                       phase_errors_upper_exact, sifting_fraction, verification_tag_bits)
from .block import (_BLOCK_SCHEMA_RULES, BLOCK_SPECS, OVERLAP_DOMAIN_BB84, PROTOCOL_NAME, TERM_SPECS, BB84Block,
                    Statistics, parse_block)
from .scenario import (_SCENARIO_SCHEMA_RULES, DEFAULT_SCENARIO, SCENARIO_SCHEMA, SCENARIO_SPECS, BB84Scenario,
                       asymptotic_rate, expected_counts, parse_scenario, scenario_fields, with_field)

#: The protocol object, and the public names of the modules re-exported (``bb84.key_length(...)``); the design
#: functions are reached through the protocol object or :mod:`.design` (``bb84.design`` is that module).
__all__ = ["BB84", "BB84_PROTOCOL", "PROTOCOL_NAME", "Statistics", "OVERLAP_DOMAIN_BB84", "TERM_SPECS", "BB84Block",
           "BLOCK_SPECS", "parse_block", "ASSUMPTIONS", "BLOCK_RULE_ASSUMPTION", "MODELLED_LEAKAGE_ASSUMPTION",
           "REFERENCES", "FORMULA_LATEX", "min_entropy_expr", "key_length_expr", "verification_tag_bits",
           "sifting_fraction", "block_ledger", "phase_errors_upper_exact", "key_length", "key_length_batch",
           "SCENARIO_SPECS", "SCENARIO_SCHEMA", "BB84Scenario", "parse_scenario", "DEFAULT_SCENARIO",
           "scenario_fields", "with_field", "asymptotic_rate", "expected_counts"]


class BB84:
    """The registered BB84 protocol object (see the protocol interface)."""

    name = PROTOCOL_NAME
    statistics_methods = tuple(m.value for m in Statistics)
    default_statistics = Statistics.EXACT.value

    parse_block = staticmethod(parse_block)
    parse_scenario = staticmethod(parse_scenario)
    scenario_fields = staticmethod(scenario_fields)
    with_field = staticmethod(with_field)
    asymptotic_rate = staticmethod(asymptotic_rate)

    # The entry points for callers run with one BLAS thread (restored afterwards); see finitekey/_threads.py.
    @staticmethod
    @with_one_blas_thread
    def design(scenario, statistics=None, **options):
        """:func:`finitekey.protocols.bb84.design.design` with one BLAS thread (see there for the parameters)."""
        return design.design(scenario, statistics, **options)

    @staticmethod
    @with_one_blas_thread
    def blocksize(scenario, target, statistics=None, **options):
        """:func:`finitekey.protocols.bb84.design.blocksize` with one BLAS thread (see there for the parameters)."""
        return design.blocksize(scenario, target, statistics, **options)

    @staticmethod
    def key_length(block, statistics=None):
        """:func:`finitekey.protocols.bb84.analysis.key_length` (see there for the parameters)."""
        return key_length(block, statistics)

    @staticmethod
    def key_length_batch(blocks, statistics=None, jobs: int = 1):
        """:func:`finitekey.protocols.bb84.analysis.key_length_batch` (see there for the parameters)."""
        return key_length_batch(blocks, statistics, jobs=jobs)

    block_specs = BLOCK_SPECS
    scenario_specs = SCENARIO_SPECS

    @staticmethod
    def fields_table() -> dict:
        """Every scenario and block field: ``{"scenario": rows, "block": rows}`` (see :func:`._spec.table_rows`).

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
        return protocol_schema(PROTOCOL_NAME, kind, BLOCK_SPECS, SCENARIO_SPECS, _BLOCK_SCHEMA_RULES,
                               _SCENARIO_SCHEMA_RULES)

    @staticmethod
    def default_scenario():
        """The built-in BB84 scenario (a fictional lab link of our own).

        Returns
        -------
        BB84Scenario
        """
        return parse_scenario(DEFAULT_SCENARIO)


BB84_PROTOCOL = register(BB84())
