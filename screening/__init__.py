"""Shortlisting of dopant and codopant pairs for wide-gap oxide photocatalyst hosts.

The package is a set of plain functions, one module a concept; the Snakemake
workflow in ``workflow/Snakefile`` calls them through thin rules.
"""

__version__ = "0.1.0"
