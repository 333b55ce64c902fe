"""sectionkit: hydrographic sections to transport budgets."""

__version__ = "0.1.0"
