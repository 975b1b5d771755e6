"""Fictional scenario files shared by the tests (invented data for a fictional lab link)."""


def bb84_toml(label: str) -> str:
    """A BB84 scenario file: 2% QBER, 1e10 signals at 1e-3 detection probability and 1 GHz, eps 1e-10/1e-15."""
    return f"""
[protocol]
name = "bb84"
label = "{label}"
[channel]
qber = 0.02
[budget]
signals = 1e10
detection_probability = 1e-3
signal_rate_hz = 1e9
[security]
eps_sec = 1e-10
eps_cor = 1e-15
"""
