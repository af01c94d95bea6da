"""What a state says about its charge and entanglement: charge-resolved Renyi entropies, p(q),
charged moments, number and configurational entropy and the entanglement spectrum, read from the
sector-labelled Schmidt values (no reduced density matrix is ever formed); charge correlations
and the correlation length from transfer matrices.
"""

from mps.analysis.correlations import connected_charge_correlations, correlation_length, local_expectations
from mps.analysis.entanglement import (
                                       charge_moments,
                                       default_alphas,
                                       entanglement_spectrum,
                                       renyi_entropy,
                                       resolve_chain,
                                       resolve_cut,
                                       resolve_cut_joint,
)
from mps.analysis.resolved import CutResolved, JointResolved, SectorWeights

__all__ = ["CutResolved", "JointResolved", "SectorWeights", "charge_moments", "connected_charge_correlations",
           "correlation_length", "default_alphas", "entanglement_spectrum", "local_expectations",
           "renyi_entropy", "resolve_chain", "resolve_cut", "resolve_cut_joint"]
