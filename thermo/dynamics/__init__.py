"""Damped point-vortex dynamics in the thermometry's domains, for seconds of relaxation.

:mod:`thermo.dynamics.velocity` gives the compiled Kirchhoff-Routh velocities with mutual
friction (from the domain's energy gradients); :mod:`thermo.dynamics.integrate` the adaptive
Dormand-Prince integrator with annihilation of close pairs and optional seeded noise. Import
names from the module that defines them.
"""
