# Helpers shared by the rules: paths of a study's outputs.


def study_dir(study):
    return f"{OUT}/{study}"


def cfg(wildcards):
    return STUDIES[wildcards.study].config_path


def response_files(name):
    def inner(wildcards):
        return [
            f"{OUT}/{wildcards.study}/work/responses/{r}/{name}"
            for r in STUDIES[wildcards.study].response_slugs
        ]

    return inner


def condition_for_response(wildcards):
    """condition.csv when a series of this response comes from the condition stage."""
    if wildcards.response in STUDIES[wildcards.study].condition_responses:
        return [f"{OUT}/{wildcards.study}/condition.csv"]
    return []


def condition_outputs(*names):
    """The condition stage's outputs ``names`` (paths under the study's folder) when the study
    has a condition section, else none."""

    def inner(wildcards):
        if STUDIES[wildcards.study].condition is None:
            return []
        return [f"{OUT}/{wildcards.study}/{name}" for name in names]

    return inner


def expand_all():
    if BATCHES:  # one record per chunk: its job writes every output of its studies
        return [f"{OUT}/batches/{chunk}.json" for chunk in BATCHES]
    outs = []
    for s in STUDIES:
        # evidence.csv (rule evidence) and report.html (rule report) pull in every job of the
        # study; the other outputs of those two jobs come with them
        outs += [f"{OUT}/{s}/evidence.csv", f"{OUT}/{s}/report.html"]
    return outs
