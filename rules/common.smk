# Helpers shared by the rules (input functions); the plan itself lives in kinset.workflow.
import os

from kinset.workflow import PYTHON, VERSION


def reel_folder(wildcards, input):
    return os.path.dirname(input.reel) or "."


def bucket_inputs(wildcards):
    return PLAN.bucket_files(wildcards.dataset, wildcards.bucket)
