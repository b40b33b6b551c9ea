"""Reading rule files: text to raw items (syntax, grammar.lark), then names resolved
and every load-time check made (load, patterns, translations, claims, exhaustive)."""
