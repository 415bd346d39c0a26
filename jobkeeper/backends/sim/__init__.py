"""The built-in simulators and what they share.

``base`` (the shared simulator: limits, memory check, description, seeded sampling of the
outcome weights), ``statevector`` (exact, noiseless) and ``densitymatrix`` (exact, noisy);
their parts: ``program`` (validation, branching points, final measurements), ``gates``
(gate matrices), ``fusion`` (small dense blocks), ``kernels`` (in-place gate kernels),
``sampling`` (outcome probabilities, draws, bit strings), ``noise`` (noise model and
channels), ``density_program`` and ``density_state`` (ρ as a vector of 4^n entries).

Only the registry (:mod:`jobkeeper.backends`) and the command line import these modules;
library code asks the registry for a backend. Nothing is imported here, so that naming
a simulator does not load numpy.
"""
