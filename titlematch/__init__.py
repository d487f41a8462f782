"""titlematch: code job titles to occupations and link establishments to a register.

Pipeline stages, one module each:
normalize -> dictionary -> candidates -> features -> coder -> confidence -> routing,
with register/blocking/comparison/linking for establishments, review/evaluate/drift
for the coding office's loop, and io/artefact/runner/cli at the edges.
"""
__version__ = "0.1.0"
