"""Handbook values of phase-change materials, each with where it came from.

Every entry is ``key: (value, source)``.  "from memory" marks values recalled
from the literature and not checked against the paper at hand; treat them as
starting points for architecture estimates, not as measured data.
"""
from __future__ import annotations

# Ge2Sb2Te5, the reference phase-change alloy.
GST225: dict[str, tuple[float, str]] = {
    "melt_c": (620.0, ("Yamada et al., J. Appl. Phys. 69, 1991: Ge2Sb2Te5 melts near 616-630 C "
                      "(from memory)")),
    "cryst_c": (150.0, ("Yamada et al., J. Appl. Phys. 69, 1991: amorphous Ge2Sb2Te5 crystallizes near "
                       "150 C under slow heating (from memory)")),
    "heat_capacity_j_cm3k": (1.25, ("about 0.2 J/(g K) x 6.2 g/cm3; values used in PCM thermal "
                                   "simulations, e.g. Pirovano et al., IEEE Trans. Electron Devices 51, "
                                   "2004 (from memory)")),
    "latent_heat_j_cm3": (420.0, ("enthalpy of fusion of Ge2Sb2Te5, a few hundred J/cm3 (from memory, "
                                 "uncertain to about 50%)")),
    "atomic_volume_nm3": (0.0306, ("from density 6.2 g/cm3 and 114 g/mol per atom of Ge2Sb2Te5 "
                                  "(density from memory)")),
    "activation_ev": (2.3, ("activation energy of crystallization of amorphous Ge2Sb2Te5, 2.2-2.9 eV "
                           "reported, e.g. Friedrich et al., J. Appl. Phys. 87, 2000 (from memory)")),
    "avrami_n": (3.0, "Avrami exponent 2.5-4 for nucleation-driven Ge2Sb2Te5 (from memory)"),
    "retention_c": (85.0, ("10-year data retention at 85 C, the usual PCM retention specification "
                          "point (common practice)")),
    "retention_years": (10.0, "10-year data retention at 85 C (common practice)"),
    "retention_fraction": (0.5, ("a cell reads SET once about half of it has crystallized "
                                "(common practice; percolation estimate)")),
}

MATERIALS: dict[str, dict[str, tuple[float, str]]] = {"gst225": GST225}

MATERIAL_KEYS = tuple(GST225)
