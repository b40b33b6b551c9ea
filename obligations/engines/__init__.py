"""The engines that decide obligations: one case (evaluate), every case up to the
bounds (enumeration), confluence and termination, and the solver glue (smt)."""
