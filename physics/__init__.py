"""tunnelsmith physics: pure numpy/scipy models of electron tunneling through layer stacks.

Conventions: energies in eV (emitter band edge at zero bias = 0), lengths in nm, masses
in m0, temperature in K, bias in V (positive bias lowers the collector), doping in
cm^-3, current density in A/cm^2. Per-layer arrays have the layer axis last, emitter
contact first and collector contact last; every routine is vectorised over leading
batch axes and an energy axis.

>>> import numpy as np
>>> from tunnelsmith import physics
>>> physics.transmission(np.array([0.1]), [0.0, 0.3, 0.0], [0.067] * 3, [0, 5.0, 0])  # doctest: +SKIP
"""

from tunnelsmith.physics.current import IVCurve, current_density, fermi_level_eV
from tunnelsmith.physics.device import Device
from tunnelsmith.physics.metrics import CATALOGUE, Evaluation, MetricRequest, evaluate
from tunnelsmith.physics.profile import DEFAULT_SLICE_nm, Profile, biased_profile
from tunnelsmith.physics.resonance import Resonances, closed_box_states, find_resonances
from tunnelsmith.physics.transfer import Scattering, log10_transmission, scattering, transmission

__all__ = [
    "CATALOGUE",
    "DEFAULT_SLICE_nm",
    "Device",
    "Evaluation",
    "IVCurve",
    "MetricRequest",
    "Profile",
    "Resonances",
    "Scattering",
    "biased_profile",
    "closed_box_states",
    "current_density",
    "evaluate",
    "fermi_level_eV",
    "find_resonances",
    "log10_transmission",
    "scattering",
    "transmission",
]
