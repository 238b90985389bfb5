"""Layer 5, present: figures, tables, plain-text summaries and the report bundle, built from
result objects; nothing new is computed here."""
