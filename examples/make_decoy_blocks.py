"""Write the example decoy-state blocks from the fictional metro link's design (run from the repository root:
``python examples/make_decoy_blocks.py``; examples/generate.sh calls it).

* ``blocks/decoy_block.json``: the expected counts of one block of the metro link at its designed parameters
  (intensities and probabilities rounded to 4 digits, counts recomputed at those values and rounded), the
  reconciliation leakage f n_X h(E_X) rounded up;
* ``blocks/decoy_block_fixed_length.json``: the same block with a fixed-length acceptance test built from the
  design (6 standard deviations per count, chernoff statistics; see the decoy proof note, section 7b).

The data are invented for a fictional link; they demonstrate the formats, nothing else.
"""

from __future__ import annotations

import json
import math
import pathlib

from finitekey import load_scenario
from finitekey.protocols import decoy_bb84 as D
from finitekey.protocols.decoy_bb84 import design as DD

HERE = pathlib.Path(__file__).resolve().parent


def _h(q: float) -> float:
    return 0.0 if q <= 0 else -(q * math.log2(q) + (1 - q) * math.log2(1 - q))


def main() -> None:
    sc = load_scenario(HERE / "metro_datacentre.toml")
    design = DD.design(sc)
    mu = [round(x, 4) for x in design.parameters["intensities"]]
    p = [round(x, 4) for x in design.parameters["intensity_probabilities"]]
    p[0] = round(1.0 - sum(p[1:]), 4)
    qx = design.parameters["key_basis_probability"]
    c = sc.model.expected_counts(sc.pulses, mu, p, qx)
    kd = [int(round(x)) for x in c.key_detections]
    ke = [min(int(round(x)), d) for x, d in zip(c.key_errors, kd)]
    td = [int(round(x)) for x in c.test_detections]
    te = [min(int(round(x)), d) for x, d in zip(c.test_errors, td)]
    leak = int(math.ceil(sc.ec_efficiency * sum(kd) * _h(sum(ke) / sum(kd))))
    block = {"protocol": "decoy-bb84", "label": "Riverside-Hilltop block 0001 (fictional)",
             "intensities": mu, "intensity_probabilities": p,
             "key_basis": {"detections": kd, "errors": ke}, "test_basis": {"detections": td, "errors": te},
             "ec_leak_bits": leak, "eps_sec": sc.eps_sec, "eps_cor": sc.eps_cor}
    (HERE / "blocks" / "decoy_block.json").write_text(json.dumps(block, indent=1) + "\n")
    # the acceptance rule of DD.acceptance_test (6 standard deviations per count, 2% leakage
    # headroom), applied to this block's expected counts at its rounded intensities
    acc = {"statistics": "chernoff", "ec_leak_bits": int(math.ceil(leak * 1.02)),
           **DD.acceptance_ranges(c.key_detections, c.test_detections, c.test_errors, sigmas=6.0)}
    fixed_block = {**block, "label": "Riverside-Hilltop block 0001, fixed-length protocol (fictional)",
                   "acceptance": acc}
    (HERE / "blocks" / "decoy_block_fixed_length.json").write_text(json.dumps(fixed_block, indent=1) + "\n")
    print("decoy_block.json:", D.key_length(D.parse_block(block)).secret_key_length, "bits (variable length)")
    print("decoy_block_fixed_length.json:", D.key_length(D.parse_block(fixed_block)).secret_key_length,
          "bits (fixed length)")


if __name__ == "__main__":
    main()
