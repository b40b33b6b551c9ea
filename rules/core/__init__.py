"""The term core: interned terms, the spec objects a rule file describes, sorts as a
tree automaton, enumeration of terms by size, and the errors a user can cause."""
