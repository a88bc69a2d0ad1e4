"""At scale: how A = K + σ²I grows with n, and what a fault-tolerant run would cost.

Two parts, after the circuits in the pipeline (they use the method registry's query models):
`qgp.scale.conditioning` measures κ, sparsity, norms and block-encoding α on nested subsets of
the user's data; `qgp.scale.fault_tolerant` and `qgp.scale.classical_cost` hold the cited cost
formulas; `qgp.scale.costs` puts them together per method against the classical GP.
"""
