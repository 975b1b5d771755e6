"""Write examples/blocks/tf_sns_block.json: the rounded expected counts of the coastal twin-field link's design."""

import json
import pathlib

from finitekey.protocols import get, load_scenario
from finitekey.protocols.tf_sns import design as tf_design

here = pathlib.Path(__file__).resolve().parent
sc = load_scenario(str(here / "coastal_relay_tf.toml"))
proto = get("tf-sns")
d = proto.design(sc)
block = tf_design.expected_block(sc, tf_design.SNSParameters(
    d.parameters["signal_intensity"], d.parameters["sending_probability"], tuple(d.parameters["decoy_intensities"]),
    tuple(d.parameters["decoy_probabilities"]), d.parameters["key_window_probability"]))
block["label"] = "coastal-relay expected block"
(here / "blocks" / "tf_sns_block.json").write_text(json.dumps(block, indent=2) + "\n")
