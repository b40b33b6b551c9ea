"""User notations: printing terms with fewest parentheses, parsing terms back."""
