# kinset workflow for one reel: extraction per dataset, devices.csv, matching per application.
#   snakemake --cores 2                              # the demo reel in data_demo/
#   snakemake --cores 2 --config reel=PATH           # another reel
import sys

from snakemake.utils import min_version, validate

from kinset.io.config import schema_path
from kinset.registry import NAMES
from kinset.workflow import BUCKET_PATTERN, make_plan

min_version("8.0")

validate(config, str(schema_path("workflow")), set_default=True)
PLAN = make_plan(config)
OUT = str(PLAN.out)
# What the reel lacks for an application, and how to proceed: said at once.
for _notice in PLAN.notices():
    print(_notice, file=sys.stderr)

wildcard_constraints:
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
