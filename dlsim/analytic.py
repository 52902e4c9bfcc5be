"""Closed-form strength estimates to set beside the simulated CRSS (reduced units: b = G = 1).

Every function takes the line tension Γ (G b²) and spacings in b, and returns a stress in G.
"""
from __future__ import annotations

import numpy as np

#: Random array of impenetrable points: CRSS ≈ 0.81 of the square-array Orowan stress 2Γ/(b L_s)
#: (Foreman & Makin, Phil. Mag. 14, 1966; the figure is from memory, good to a few per cent).
FOREMAN_MAKIN_FACTOR = 0.81
#: Taylor factor of a randomly textured FCC polycrystal (Taylor 1938; 3.06 as computed by
#: Bishop & Hill 1951 and used by Kocks, Phil. Mag. 1970; common practice).
TAYLOR_FCC = 3.06


def orowan(gamma: float, spacing: float) -> float:
    """Orowan stress 2Γ/(b L) of a square array of impenetrable points (Hull & Bacon)."""
    return 2.0 * gamma / spacing


def square_array(gamma: float, spacing: float, critical_angle: float) -> float:
    """CRSS of a square array with the line along a row: (2Γ/(bL)) cos(φ_c/2) (docs/physics.md)."""
    return orowan(gamma, spacing) * np.cos(0.5 * critical_angle)


def orowan_finite(gamma: float, spacing: float, mean_radius: float) -> float:
    """Bypass stress of finite impenetrable discs: 2Γ/(b(L − 2ρ)) (free span between discs)."""
    return 2.0 * gamma / (spacing - 2.0 * mean_radius)


def friedel(gamma: float, spacing: float, critical_angle: float) -> float:
    """Friedel's weak-obstacle limit for a random array: (2Γ/(b L_s)) cos(φ_c/2)^(3/2).

    Friedel, *Dislocations* (1964); the form of docs/physics.md and Kocks, Argon & Ashby (1975).
    """
    return orowan(gamma, spacing) * np.cos(0.5 * critical_angle) ** 1.5


def foreman_makin(gamma: float, spacing: float) -> float:
    """Random array of impenetrable points, ≈ 0.81 · 2Γ/(b L_s) (Foreman & Makin 1966, from memory)."""
    return FOREMAN_MAKIN_FACTOR * orowan(gamma, spacing)


def critical_force(gamma: float, critical_angle: float) -> float:
    """F_c = 2Γ cos(φ_c/2): the pull of two arms meeting at angle φ_c (docs/physics.md)."""
    return 2.0 * gamma * np.cos(0.5 * critical_angle)


def critical_angle(gamma: float, force: float) -> float:
    """Inverse of :func:`critical_force`; 0 for forces of 2Γ and more (impenetrable)."""
    ratio = np.clip(np.asarray(force, dtype=float) / (2.0 * gamma), 0.0, 1.0)
    return 2.0 * np.arccos(ratio)


def superpose(stresses, exponent: float) -> float:
    """Mixed populations: τ = (Σ τ_i^k)^(1/k), k = 1 linear, k = 2 Pythagorean (docs/physics.md)."""
    if not 1.0 <= exponent <= 2.0:
        raise ValueError(f"superposition exponent {exponent} outside [1, 2]")
    s = np.asarray(stresses, dtype=float)
    return float(np.sum(s ** exponent) ** (1.0 / exponent))


def random_bypass(gamma: float, spacing: float, mean_radius: float) -> float:
    """Random impenetrable discs: 0.81 · 2Γ/(b (L_s − 2⟨ρ⟩)), the Foreman–Makin factor applied to
    the free span between discs (a rough estimate, common practice; from memory)."""
    return FOREMAN_MAKIN_FACTOR * orowan_finite(gamma, spacing, mean_radius)


def strength_increment(crss: float, taylor_factor: float = TAYLOR_FCC) -> float:
    """Uniaxial yield strength increment Δσ = M τ_c (docs/physics.md; M from :data:`TAYLOR_FCC`)."""
    return taylor_factor * crss


#: What each estimate (``estimates`` keys ``<model>_MPa``) assumes, in a phrase (tables, legends).
ESTIMATES = {
    "orowan_square": ("Orowan, square array", "2Γ/(bL): impenetrable points on a square array of "
                                              "the same spacing"),
    "square_array": ("square array, exact", "(2Γ/(bL)) cos(φc/2): the line along a row of a "
                                            "square array"),
    "orowan_finite": ("Orowan, finite discs", "2Γ/(b(L_s − 2⟨ρ⟩)): the free span between "
                                              "impenetrable discs"),
    "foreman_makin": ("Foreman–Makin random array",
                      "0.81 · 2Γ/(b L_s): random impenetrable points (Foreman & Makin 1966, from "
                      "memory)"),
    "friedel": ("Friedel random array",
                "(2Γ/(b L_s)) cos^(3/2)(φc/2): random weak points (Friedel 1964), mean F_c of the "
                "sheared particles"),
    "superposition_linear": ("linear superposition", "Σ τ_i of the populations' own estimates"),
    "superposition_pythagorean": ("Pythagorean superposition", "(Σ τ_i²)^(1/2) of the "
                                                               "populations' own estimates"),
}
