"""The buyer's view: few, stockable, cheap parts.

``costing`` (cost per board, cost limit and ranking, stock sufficiency), ``model``
(the consolidation data types and the CP-SAT model), ``reductions`` (exact model
reductions before CP-SAT), ``partcover`` (the exact fewest-parts cover search),
``consolidate`` (one design per channel with the fewest distinct parts) and
``binding`` (the constraint that makes a plan infeasible).
"""
