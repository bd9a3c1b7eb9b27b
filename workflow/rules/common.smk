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


def expand_all():
    outs = []
    for s in STUDIES:
        # evidence.csv (rule evidence) and report.html (rule report) pull in every job of the
        # study; the other outputs of those two jobs come with them
        outs += [f"{OUT}/{s}/evidence.csv", f"{OUT}/{s}/report.html"]
    return outs
