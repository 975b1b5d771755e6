"""Write examples/blocks/mdi_block.json: the rounded expected counts of the campus relay link's design."""

import json
import pathlib

from finitekey.protocols import get, load_scenario

here = pathlib.Path(__file__).resolve().parent
sc = load_scenario(str(here / "campus_relay_mdi.toml"))
d = get("mdi-bb84").design(sc)
p, c = d.parameters, d.expected_counts


def rnd(table):
    return [[int(round(x)) for x in row] for row in table]


def capped(errors, detections):
    return [[min(e, x) for e, x in zip(re, rx)] for re, rx in zip(rnd(errors), detections)]


kd, td = rnd(c["key_basis.detections"]), rnd(c["test_basis.detections"])
block = {"protocol": "mdi-bb84", "label": "campus relay, expected counts of the design at 1e12 pulse pairs",
         "alice_intensities": p["intensities"][0], "alice_intensity_probabilities": p["intensity_probabilities"][0],
         "bob_intensities": p["intensities"][1], "bob_intensity_probabilities": p["intensity_probabilities"][1],
         "key_basis": {"detections": kd, "errors": capped(c["key_basis.errors"], kd)},
         "test_basis": {"detections": td, "errors": capped(c["test_basis.errors"], td)},
         "ec_leak_bits": int(c["ec_leak_bits"]), "eps_sec": sc.eps_sec, "eps_cor": sc.eps_cor,
         "pulses": int(sc.pulses)}
(here / "blocks" / "mdi_block.json").write_text(json.dumps(block, indent=1) + "\n")
