"""Radiative transfer solvers: 3D and independent-column Monte Carlo, the direct beam, delta-Eddington,
the backward longwave column fluxes."""

from ..core.config import SOLAR_CONSTANT
from .heating import heating_rate
from .montecarlo import solve_monte_carlo
from .thermal_backward import backward_longwave_fluxes
from .two_stream import delta_eddington, solve_scene as solve_two_stream

__all__ = ["SOLAR_CONSTANT", "backward_longwave_fluxes", "delta_eddington", "heating_rate", "solve_monte_carlo",
           "solve_two_stream"]
