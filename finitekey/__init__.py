"""finitekey: finite-key security parameters for quantum key distribution.

Design aid only: every result holds under the proof assumptions and device
model it states.  Deployed systems need an independent security evaluation
under the applicable standards and certification schemes.
"""

__version__ = "0.1.0"
