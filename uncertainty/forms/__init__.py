"""Model forms: the catalogue (what each form takes, solves and returns) and their evaluation."""
