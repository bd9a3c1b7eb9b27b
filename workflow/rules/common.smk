# Helpers shared by the rules: paths of a study's outputs.


def study_dir(study):
    return f"{OUT}/{study}"


def cfg(wildcards):
    return STUDIES[wildcards.study].config_path


def responses_dir(wildcards):
    """The screen's output: one folder per response of the study (work/responses/<response>/)."""
    return f"{OUT}/{wildcards.study}/work/responses"


def screen_reads(wildcards):
    """Per response slug, what its screen reads: its input files and condition.csv (when a
    series of the response comes from the condition stage, else none)."""
    planned = STUDIES[wildcards.study]
    condition = [f"{OUT}/{wildcards.study}/condition.csv"]
    return {
        r: {
            "inputs": list(planned.response_inputs[r]),
            "condition": condition if r in planned.condition_responses else [],
        }
        for r in planned.response_slugs
    }


def screen_inputs(wildcards):
    """The input files of the study's screen job: those of its responses, in the config's order."""
    planned = STUDIES[wildcards.study]
    used = {f for files in planned.response_inputs.values() for f in files}
    return [f for f in planned.input_paths if f in used]


def condition_for_screen(wildcards):
    """condition.csv when a series of one of the study's responses comes from the condition stage."""
    if STUDIES[wildcards.study].condition_responses:
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
