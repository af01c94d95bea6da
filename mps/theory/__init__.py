"""What the answer should be: the exact lattice free-fermion engine (correlation-matrix method)
and the field-theory forms (Calabrese-Cardy, Luttinger-liquid charge fluctuations, equipartition,
massive saturation) with the fits that compare them with data.
"""

from mps.theory.fieldtheory import (
                                    Equipartition,
                                    GaussianDistance,
                                    LogFit,
                                    MomentFit,
                                    equipartition,
                                    fit_central_charge,
                                    fit_charged_moment,
                                    fit_luttinger,
                                    gaussian_distance,
                                    luttinger_bethe_ansatz,
)
from mps.theory.freefermions import correlation_matrix, resolve_all_cuts, resolve_block

__all__ = ["Equipartition", "GaussianDistance", "LogFit", "MomentFit", "correlation_matrix", "equipartition",
           "fit_central_charge", "fit_charged_moment", "fit_luttinger", "gaussian_distance",
           "luttinger_bethe_ansatz", "resolve_all_cuts", "resolve_block"]
