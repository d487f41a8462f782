"""The SOC hierarchy's levels, in a module without dependencies so the command line can offer them
as choices without loading pandas (see ``titlematch.cli``)."""

SOC_LEVELS = ("as_given", "detailed", "broad", "minor", "major")  # levels of the SOC hierarchy to compare at
