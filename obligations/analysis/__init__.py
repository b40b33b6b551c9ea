"""Why a claim fails: the rules and equations a counterexample needs."""
