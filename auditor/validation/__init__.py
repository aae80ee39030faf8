"""Known-truth scenarios shared by the tests, the validation scripts and the self-check."""
