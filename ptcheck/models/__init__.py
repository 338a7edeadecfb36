"""Built-in model builders: each returns a :class:`ptcheck.Model` ``H0 + λ V`` (or ``H0 + Σ λ_i V_i``).

Every builder takes keyword-only parameters (documented defaults; invented
round numbers where no physical default exists) and splits the Hamiltonian so
that λ multiplies the physical coupling (λ = 1: the physical value) unless its
docstring says otherwise.  :data:`BUILDERS` maps plain names to builders (used
by model files and the command line).  :func:`truncation_check` tells whether
a truncated model's exact level has converged in the truncation.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from types import MappingProxyType

from ..model import Model
from .cavity import jaynes_cummings, rabi
from .charge import charge_qubit, planar_rotor
from .hubbard import hubbard_dimer
from .kerr import coupled_kerr_qubits, kerr_qubit_resonator
from .molecule import polar_molecule
from .oscillator import anharmonic_oscillator
from .rotor import linear_rotor
from .spin_chain import spin_chain
from .truncation import TruncationCheck, truncation_check
from .two_level import two_level

__all__ = [
    "BUILDERS",
    "TruncationCheck",
    "anharmonic_oscillator",
    "charge_qubit",
    "coupled_kerr_qubits",
    "hubbard_dimer",
    "jaynes_cummings",
    "kerr_qubit_resonator",
    "linear_rotor",
    "planar_rotor",
    "polar_molecule",
    "rabi",
    "spin_chain",
    "truncation_check",
    "two_level",
]

#: Plain name -> builder (read-only mapping).
BUILDERS: Mapping[str, Callable[..., Model]] = MappingProxyType(
    {
        "two_level": two_level,
        "jaynes_cummings": jaynes_cummings,
        "rabi": rabi,
        "kerr_qubit_resonator": kerr_qubit_resonator,
        "coupled_kerr_qubits": coupled_kerr_qubits,
        "anharmonic_oscillator": anharmonic_oscillator,
        "charge_qubit": charge_qubit,
        "planar_rotor": planar_rotor,
        "linear_rotor": linear_rotor,
        "spin_chain": spin_chain,
        "hubbard_dimer": hubbard_dimer,
        "polar_molecule": polar_molecule,
    }
)
