"""The use cases: each command calls one function of a module here."""
