"""Materials and reduced units.

Inside dlsim a length of 1 is the Burgers vector b, a stress of 1 is the shear modulus G and a force
(or a line tension) of 1 is G b².  :class:`Units` converts between these and the file units nm, MPa
and nN; :data:`TABLE` holds isotropic elastic constants of common metals.
"""
from __future__ import annotations

from dataclasses import dataclass

MPA_PER_GPA = 1000.0


@dataclass(frozen=True)
class Units:
    """Reduced units of one material: length b, stress G, force G b².

    Every method works on floats and on numpy arrays alike.

    Parameters
    ----------
    b_nm : float
        Burgers vector length (nm): one reduced length.
    G_GPa : float
        Shear modulus (GPa): one reduced stress is ``G_GPa * 1000`` MPa.  One reduced force is
        ``G_GPa * b_nm**2`` nN, since GPa·nm² = 10⁹ N/m² · 10⁻¹⁸ m² = nN.
    """

    b_nm: float
    G_GPa: float

    def length(self, nm):
        """Length in nm -> length in b."""
        return nm / self.b_nm

    def length_nm(self, reduced):
        """Length in b -> length in nm."""
        return reduced * self.b_nm

    def stress(self, MPa):
        """Stress in MPa -> stress in G."""
        return MPa / (self.G_GPa * MPA_PER_GPA)

    def stress_MPa(self, reduced):
        """Stress in G -> stress in MPa."""
        return reduced * (self.G_GPa * MPA_PER_GPA)

    def force(self, nN):
        """Force (or line tension) in nN -> force in G b²."""
        return nN / (self.G_GPa * self.b_nm**2)

    def force_nN(self, reduced):
        """Force (or line tension) in G b² -> force in nN."""
        return reduced * (self.G_GPa * self.b_nm**2)


@dataclass(frozen=True)
class Material:
    """Isotropic elastic constants and Burgers vector of one crystal.

    Parameters
    ----------
    symbol : str or None
        Key in :data:`TABLE` the values came from, or None for a material given by numbers only.
    shear_modulus_GPa : float
        Shear modulus G (GPa).
    poisson_ratio : float
        Poisson ratio ν.
    burgers_nm : float
        Burgers vector length b (nm).
    """

    symbol: str | None
    shear_modulus_GPa: float
    poisson_ratio: float
    burgers_nm: float

    @property
    def units(self) -> Units:
        """The reduced units of this material (length b, stress G, force G b²)."""
        return Units(b_nm=self.burgers_nm, G_GPa=self.shear_modulus_GPa)


# Room-temperature values.  G and ν are Hill (1952) averages (the mean of the Voigt and Reuss
# bounds) of the single-crystal elastic constants C_ij: the isotropic constants of an untextured
# polycrystal.  The C_ij are from memory, as compiled in G. Simmons & H. Wang, *Single Crystal
# Elastic Constants and Calculated Aggregate Properties*, MIT Press 1971; the tests recompute the
# averages and check E = 2G(1+ν) against handbook Young's moduli.  These G are not Frost & Ashby's
# μ0 (*Deformation-Mechanism Maps*, 1982), which for cubic metals is sqrt(C44 (C11-C12)/2) and runs
# lower (42 instead of 47 GPa for Cu).  Ni: the Hill value (86 GPa) exceeds the usual polycrystal
# handbook value (about 76 GPa, from memory).
# b is the shortest lattice translation of the usual slip system, from the room-temperature lattice
# parameter a (from memory, e.g. C. Kittel, *Introduction to Solid State Physics*): a/√2 for fcc
# {111}<110>, a√3/2 for bcc {110}<111>, a for hcp basal <11-20>.  They agree with Frost & Ashby's
# b to the three digits given there (from memory).
TABLE: dict[str, Material] = {
    m.symbol: m
    for m in (
        #         symbol  G (GPa)  ν      b (nm)   structure, a (nm)
        Material("Al", 26.1, 0.346, 0.2863),  # fcc, 0.40495
        Material("Cu", 47.3, 0.345, 0.2556),  # fcc, 0.36149
        Material("Ni", 86.2, 0.294, 0.2492),  # fcc, 0.35240
        Material("Ag", 29.7, 0.369, 0.2889),  # fcc, 0.40853
        Material("Au", 27.5, 0.424, 0.2884),  # fcc, 0.40782
        Material("Fe", 81.8, 0.289, 0.2482),  # alpha-Fe, bcc, 0.28665
        Material("W", 160.0, 0.280, 0.2741),  # bcc, 0.31652 (nearly isotropic: Voigt = Reuss)
        Material("Mo", 124.4, 0.295, 0.2725),  # bcc, 0.31470
        Material("Mg", 17.3, 0.289, 0.3209),  # hcp, a = 0.32094
    )
}
