"""Layer 7, recipes: the TOML recipe format, its validation with key and line, and running a
recipe's analyses."""
