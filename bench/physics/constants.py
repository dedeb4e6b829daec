"""Physical constants used by the physics modules (CODATA values through scipy.constants)."""

from scipy import constants

H = constants.h  #: Planck constant, J s (CODATA via scipy.constants)
C = constants.c  #: speed of light in vacuum, m/s
K_B = constants.k  #: Boltzmann constant, J/K
