# Junction capacitance: a series R-L-C element is fitted to each Touchstone file, giving one
# capacitance point per file (a few jobs, by stable buckets of device ids:
# kinset.workflow.vna_groups), the C-V tables are parsed by the generic parse rule, and one
# job fits CJO, VJ, M of every device.


rule fit_touchstone:
    input:
        files=vna_inputs,
        # ancient(): a new row for another device must not rerun this job; this job's
        # own rows are tracked by params.rows.
        index=ancient(PLAN.vna_index),
    output:
        f"{OUT}/parsed/touchstone/{{group}}.npz",
    log:
        f"{OUT}/logs/fit_touchstone/{{group}}.log",
    wildcard_constraints:
        group=BUCKET_PATTERN,
    params:
        python=PYTHON,
        version=VERSION,
        devices=vna_devices,
        rows=vna_rows,
    threads: 1
    resources:
        mem_mb=1000,
        runtime=10,
    conda:
        "../envs/kinset.yaml"
    shell:
        "{params.python} -m kinset fit-touchstone -o {output} {input.index:q} "
        "--devices {params.devices:q} 2> {log}"


rule extract_capacitance:
    input:
        parsed=PLAN.parsed("capacitance"),
        touchstone=PLAN.touchstone_points(),
        # Touchstone files the index does not name: reported as rejected.
        unlisted=PLAN.vna_unlisted,
        reel=ancient(PLAN.reel_yaml),
    output:
        table=f"{OUT}/capacitance.csv",
        points=f"{OUT}/capacitance_points.csv",
    log:
        f"{OUT}/logs/extract_capacitance.log",
    params:
        python=PYTHON,
        version=VERSION,
        reel=reel_folder,
        settings=PLAN.settings_digest("capacitance"),
    threads: 1
    resources:
        mem_mb=2000,
        runtime=20,
    conda:
        "../envs/kinset.yaml"
    shell:
        "{params.python} -m kinset extract capacitance --reel {params.reel:q} "
        "-o {output.table} {input.parsed} {input.touchstone} {input.unlisted:q} 2> {log}"
