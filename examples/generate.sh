#!/usr/bin/env bash
# Regenerate every table and plot of the examples (run from the repository root: bash examples/generate.sh).
set -euo pipefail
cd "$(dirname "$0")"
fk() { python -m finitekey.cli "$@"; }

# 0. the example decoy-state blocks (expected counts of the metro link's design; a fixed-length variant)
python make_decoy_blocks.py

# 1. metropolitan link between two data centres
fk table metro_datacentre.toml --vary block.pulses=1e9,1e10,1e11,1e12 -o metro_datacentre_table.md
fk plot metro_datacentre.toml --vary link.distance_km=0:80:10 --vary block.pulses=1e9,1e11 -o metro_datacentre_rate.png

# 2. long-haul span between trusted nodes
fk table longhaul_trusted_node.toml --vary link.distance_km=80:200:40 --vary block.pulses=1e11,1e12 \
   -o longhaul_trusted_node_table.md
fk plot longhaul_trusted_node.toml --vary link.distance_km=0:300:30 --vary block.pulses=1e10,1e12 \
   -o longhaul_trusted_node_rate.png

# 3. short, high-loss free-space pass: how much loss a single small block tolerates
fk table freespace_pass.toml --vary link.extra_loss_db=26:38:2 -o freespace_pass_table.md
fk table freespace_pass.toml --vary link.extra_loss_db=28:36:4 --blocksize positive -o freespace_pass_blocksize.md
fk plot freespace_pass.toml --vary link.extra_loss_db=24:40:2 --vary block.pulses=5e9,2.5e10 -o freespace_pass_rate.png

# a full report for one of them
fk report metro_datacentre.toml --vary link.distance_km=0:80:20 --vary block.pulses=1e9,1e11 \
   -o metro_datacentre_report.html --latex metro_datacentre_report.tex

# 4. twin-field link through an untrusted relay (tf-sns): the example block, a table and a rate plot
python make_tf_block.py
fk table coastal_relay_tf.toml --vary link.distance_km=300:500:100 --vary block.windows=1e12,1e14 \
   -o coastal_relay_tf_table.md
fk plot coastal_relay_tf.toml --vary link.distance_km=100:600:50 --vary block.windows=1e12,1e14 \
   -o coastal_relay_tf_rate.png

# 5. MDI relay between two campuses (untrusted relay in a third party's exchange; arms of different length)
python make_mdi_block.py
fk table campus_relay_mdi.toml --vary link.distance_km=30:90:30 --vary block.pulses=1e11,1e12 \
   -o campus_relay_mdi_table.md
fk plot campus_relay_mdi.toml --vary link.distance_km=0:140:20 --vary block.pulses=1e11,1e13 \
   -o campus_relay_mdi_rate.png

# 6. the three protocols side by side on one fibre route (same fibre, detectors, source rate, block size and
#    epsilons; the relay protocols with the relay in the middle): decoy-state BB84, MDI and twin-field, each
#    designed over one distance axis; the table sets the scenarios side by side (key rate per pulse), the figure
#    gives one curve per file, the route's repeaterless bound and the distance from which twin-field beats it
fk compare compare/route_decoy_bb84.toml compare/route_mdi_bb84.toml compare/route_tf_sns.toml \
   --vary link.distance_km=0:500:25 --pivot link.distance_km,scenario \
   -o protocols_compared_table.md -o protocols_compared_rate.png
