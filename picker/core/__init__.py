"""The numerical core: pure, vectorised functions over numpy arrays in SI units.

``search`` (the exact, topology-generic search of the discrete value space),
``screen`` (first-order yield and corners), ``propagation`` (first-order variance
shares and the temperature shift), ``sampling`` (random and Sobol inputs),
``montecarlo`` (yield with common random numbers), ``precision`` (sampling until
a confidence half-width is met) and ``ranking``.
"""
