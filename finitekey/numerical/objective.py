"""The objective ``f(rho) = sum_a D(G_a(rho) || Z(G_a(rho)))`` and its gradient, in floating point (nats).

With the facially reduced factors of :func:`finitekey.numerical.model.key_map_blocks`,

    f(rho)      = sum_a [ Tr(X_a log X_a) - sum_k Tr(Y_ak log Y_ak) ],   X_a = g_a rho g_a^dagger, Y_ak = z_ak rho z_ak^dagger
    grad f(rho) = sum_a [ g_a^dagger log(X_a) g_a - sum_k z_ak^dagger log(Y_ak) z_ak ]

(the ``+1`` of ``d Tr X log X = Tr (log X + 1) dX`` cancels because ``sum_k z_ak^dagger z_ak = g_a^dagger g_a``).
``f`` is convex and positively homogeneous of degree one, so ``Tr(rho grad f(rho)) = f(rho)`` and, by convexity,
``f(sigma) >= Tr(sigma grad f(rho))`` for every ``sigma >= 0`` and every positive definite ``rho``: the minimum of
the *linear* function ``Tr(sigma grad f(rho))`` over the feasible set is a lower bound on the minimum of ``f``.
"""

from __future__ import annotations

import numpy as np

__all__ = ["Objective", "LN2"]

LN2 = float(np.log(2.0))


def _tr_xlogx(x: np.ndarray) -> float:
    w = np.linalg.eigvalsh((x + x.conj().T) / 2)
    w = w[w > 0]
    return float(np.sum(w * np.log(w)))


def _logm_h(x: np.ndarray) -> np.ndarray:
    """Matrix logarithm of a positive definite Hermitian matrix (eigen-decomposition)."""
    w, u = np.linalg.eigh((x + x.conj().T) / 2)
    return (u * np.log(w)) @ u.conj().T


class Objective:
    """``f`` and its gradient for a tuple of :class:`~finitekey.numerical.model.KeyMapBlock`.

    Parameters
    ----------
    blocks : tuple of KeyMapBlock
        The facially reduced factors, one block per announcement.
    """

    def __init__(self, blocks):
        self.blocks = tuple(blocks)
        self.factors = []          # (sign, factor): +1 for g_a, -1 for z_ak
        for b in self.blocks:
            self.factors.append((1.0, b.g))
            self.factors.extend((-1.0, z) for z in b.z)

    def value(self, rho: np.ndarray) -> float:
        """``f(rho)`` in nats (``0 log 0 = 0``; valid on the boundary of the cone)."""
        return sum(s * _tr_xlogx(f @ rho @ f.conj().T) for s, f in self.factors)

    def gradient(self, rho: np.ndarray) -> np.ndarray:
        """``grad f(rho)`` (Hermitian) at a positive definite ``rho``."""
        out = np.zeros_like(rho, dtype=complex if np.iscomplexobj(rho) or any(np.iscomplexobj(f) for _, f in
                                                                               self.factors) else float)
        for s, f in self.factors:
            out = out + s * (f.conj().T @ _logm_h(f @ rho @ f.conj().T) @ f)
        return (out + out.conj().T) / 2
