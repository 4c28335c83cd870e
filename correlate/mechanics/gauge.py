"""What a strain gauge indicates: the transverse-sensitivity relation, written once.

A grid of transverse sensitivity Kt, calibrated by its maker on a material of Poisson's ratio nu0,
indicates

    e_ind = (e_a + Kt e_t) / (1 - nu0 Kt)

for the axial strain e_a along the grid and the transverse strain e_t across it, in its plane
(Vishay Micro-Measurements Tech Note TN-509, "Errors due to transverse sensitivity in strain
gages"). The model side of every comparison goes through :func:`indicated_strain`.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

# Wheatstone-bridge arm signs: Vo/Vex = (k/4)(e1 - e2 + e3 - e4), arms 1 and 3 add, 2 and 4
# subtract (Hoffmann 1989, the Wheatstone bridge chapter). Written once for the model and test side.
BRIDGE_ARM_SIGNS = (1.0, -1.0, 1.0, -1.0)


def indicated_strain(axial: ArrayLike, transverse: ArrayLike, kt: ArrayLike,
                     nu0: ArrayLike) -> NDArray[np.float64]:
    """Return the strain a grid indicates from its axial and transverse strains.

    Parameters
    ----------
    axial, transverse : array_like
        Strain along and across the grid, in the surface plane. [any strain unit]
    kt : array_like
        Transverse sensitivity as a fraction (0.009 for 0.9 %); 0 or NaN-free.
    nu0 : array_like
        Poisson's ratio of the calibration material.

    Returns
    -------
    ndarray
        The indicated strain, in the unit of ``axial``; broadcast over the inputs.

    Examples
    --------
    >>> float(indicated_strain(1000.0, -300.0, 0.0, 0.285))
    1000.0
    """
    kt = np.asarray(kt, dtype=float)
    return (np.asarray(axial, dtype=float) + kt * np.asarray(transverse, dtype=float)) \
        / (1.0 - np.asarray(nu0, dtype=float) * kt)


__all__ = ["BRIDGE_ARM_SIGNS", "indicated_strain"]
