"""Layer 7, recipes: the TOML recipe format (``schema``), its validation with key and line
(``parse``), running a recipe's analyses through the registry (``run``) and the report bundle
of a run (``bundle``)."""
