"""The value analysis: what an expression holds and where it came from.

Rules never walk definitions themselves; they ask this package. Modules, along the
order in which they build on each other:

- ``bindings``: scopes and reaching definitions (which assignment a use sees; a use
  reached by more than one is ambiguous, and ambiguous means "cannot tell").
- ``names``: import-aware resolution of names to framework operations and array modules.
- ``facts``: meaning behind shapes (same value, reductions, signs and bounds, guards).
- ``ranges``: integers, constants and bounds from clips, masks and branches.
- ``origins``: where probabilities and log-probabilities come from, across helpers,
  methods, ``self`` attributes, layers, parameters and modules of the scanned tree.
- ``summaries``: per-function summaries (computed once, cached on the function's scope)
  and the project table that carries them across files.
"""
