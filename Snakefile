# kinset workflow for one reel or several: extraction per dataset, devices.csv, matching per
# application, each reel in its own results/<reel id>/ (the {reel} wildcard of every rule).
#   snakemake --cores 2                              # the demo reels in data_demo*/
#   snakemake --cores 2 --config reel=PATH           # another reel
#   snakemake --cores 2 --config reel=PATH1,PATH2    # several reels in one run
import sys

from snakemake.utils import min_version, validate

from kinset.io.config import schema_path
from kinset.registry import NAMES
from kinset.workflow import BUCKET_PATTERN, make_plans

min_version("8.0")

validate(config, str(schema_path("workflow")), set_default=True)
# PLAN stands for the plan of each job's reel (kinset.workflow.Plans); OUT is
# <results>/{reel}.
PLAN = make_plans(config)
OUT = PLAN.out
# What the reel lacks for an application, and how to proceed: said at once.
for _notice in PLAN.notices():
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
