"""Sending-or-not-sending twin-field QKD (``tf-sns``): link model, block format, certified key length, design."""
