"""Critical pairs: sorted unification of left-hand sides, overlaps and their joinability."""
