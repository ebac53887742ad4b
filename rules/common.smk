# Helpers shared by the rules (input functions); the plan itself lives in kinset.workflow.
import os

from kinset.workflow import VERSION, rule_python

# The interpreter a rule's command runs: with --sdm conda, the one of the rule's conda
# environment (envs/kinset.yaml, activated by Snakemake: plain "python"); otherwise the
# interpreter running Snakemake, which has kinset installed even when no venv is active.
PYTHON = rule_python(workflow.deployment_settings.deployment_method)


def reel_folder(wildcards, input):
    return os.path.dirname(input.reel) or "."


def bucket_inputs(wildcards):
    return PLAN.of(wildcards).bucket_files(wildcards.dataset, wildcards.bucket)


def parse_memory(wildcards):
    """A parse job's declared memory, by the size of its files (kinset.workflow.PARSE_MEMORY_PER_MB)."""
    return PLAN.of(wildcards).parse_memory_mb(wildcards.dataset, wildcards.bucket)


def application_profile(wildcards):
    return PLAN.of(wildcards).profile(wildcards.application)


def earlier_sets(wildcards):
    """sets.csv and summary.json of the applications served before this one."""
    return [f"{d}/{f}" for d in PLAN.of(wildcards).earlier(wildcards.application)
            for f in ("sets.csv", "summary.json")]


def ledger_inputs(wildcards):
    return PLAN.of(wildcards).ledger_inputs()


def match_options(wildcards):
    return PLAN.of(wildcards).match_options(wildcards.application)


def results_folder(wildcards, input):
    return os.path.dirname(input.devices)


def output_folder(wildcards, output):
    return os.path.dirname(output.sets)


def vna_inputs(wildcards):
    return PLAN.of(wildcards).vna_files(wildcards.group)


def vna_devices(wildcards):
    return PLAN.of(wildcards).vna_devices(wildcards.group)


def vna_rows(wildcards):
    return PLAN.of(wildcards).vna_digest(wildcards.group)
