# Helpers shared by the rules: paths of a study's outputs.


def study_dir(study):
    return f"{OUT}/{study}"


def cfg(wildcards):
    return STUDIES[wildcards.study].config_path


def response_files(name):
    def inner(wildcards):
        return [f"{OUT}/{wildcards.study}/work/responses/{r}/{name}"
                for r in STUDIES[wildcards.study].response_slugs]
    return inner


def expand_all():
    outs = []
    for s in STUDIES:
        outs += [f"{OUT}/{s}/{name}" for name in ("screen.csv", "evidence.csv", "report.html", "provenance.json")]
        outs.append(f"{OUT}/{s}/work/ledger_update.json")  # the forecast ledger's update (rule ledger)
    return outs
