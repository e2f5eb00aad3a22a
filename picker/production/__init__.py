"""The production view: spread drivers, yield over temperature, what to buy, trimmer sizing.

``figures`` (per-candidate figures and plot inputs), ``advice`` (buy tighter,
tolerance sweep, trimmer advice), ``drivers`` (Monte Carlo variance shares),
``tighter`` (tolerance ladder, ranked changes, greedy plan) and ``trimmer``
(trimmer sizing).
"""
