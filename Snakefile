# kinset workflow for one reel or several: extraction per dataset, devices.csv, matching per
# application, each reel in its own results/<reel id>/ (the {reel} wildcard of every rule).
#   snakemake --cores 2                              # the demo reels in data_demo*/
#   snakemake --cores 2 --config reel=PATH           # another reel
#   snakemake --cores 2 --config reel=PATH1,PATH2    # several reels in one run
import sys

from snakemake.utils import min_version

from kinset.errors import InputError
from kinset.registry import NAMES
from kinset.workflow import (BUCKET_PATTERN, check_config, last_words, make_plans, stopped,
                             when_nothing_to_do)

min_version("8.0")

# A typo in --config, reel.yaml or an application profile: one line naming the file, line
# and key, before any job runs (not the schema, not a traceback).
# PLAN stands for the plan of each job's reel (kinset.workflow.Plans); OUT is
# <results>/{reel}.
try:
    config.update(check_config(config))
    PLAN = make_plans(config)
    _NOTICES = PLAN.notices()
except InputError as _error:
    sys.exit(f"kinset: error: {_error}")
OUT = PLAN.out
# What the reel lacks for an application, and how to proceed: said at once.
for _notice in _NOTICES:
    print(_notice, file=sys.stderr)

wildcard_constraints:
    reel=PLAN.reel_pattern,
    dataset="|".join(NAMES),
    bucket=BUCKET_PATTERN,
    application=BUCKET_PATTERN,


include: "rules/common.smk"
include: "rules/parse.smk"
include: "rules/forward.smk"
include: "rules/leakage.smk"
include: "rules/recovery.smk"
include: "rules/capacitance.smk"
include: "rules/devices.smk"
include: "rules/match.smk"
include: "rules/report.smk"


rule all:
    default_target: True
    input:
        PLAN.targets(),


# The run's last words: what each application made, or why the run stopped (a failed job's
# log is also printed where it failed: show-failed-logs in profiles/default).
onsuccess:
    last_words(PLAN)

# A rerun with nothing to do skips onsuccess; it ends on the same words.
when_nothing_to_do(lambda: last_words(PLAN))

onerror:
    print(stopped(log), file=sys.stderr)
