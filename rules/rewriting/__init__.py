"""Rewriting: matching with binders and contexts, instantiating right-hand sides,
one-step reducts and reduction graphs, applying translations."""
