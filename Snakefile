# lagsieve: the screening workflow. At the repository root, `snakemake --cores 2` runs the
# invented demo study (config/config.yaml); `lagsieve run CONFIG` runs any study from anywhere.
# The workflow itself (rules, scripts, config schema) lives in workflow/, which the package
# also ships as `lagsieve.workflow`, so an installed tool needs no source checkout.


include: "workflow/Snakefile"


# An included file cannot choose the default target, so the root names it again: every output
# of every study, the inputs of rule `all` in workflow/Snakefile. (A comment, not a docstring:
# snakefmt puts default_target first, and then cannot read a docstring after it.)
rule default:
    default_target: True
    input:
        rules.all.input,
