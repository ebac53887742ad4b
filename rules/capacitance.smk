# Junction capacitance: the Touchstone files become capacitance points (a few jobs, by stable
# buckets of device ids: kinset.workflow.vna_groups), the C-V tables are parsed
# by the generic parse rule, and one job fits CJO, VJ, M of every device.


rule parse_capacitance_vna:
    input:
        files=vna_inputs,
        # ancient(): a new row for another device must not rerun this job; this job's
        # own rows are tracked by params.rows.
        index=ancient(PLAN.vna_index),
    output:
        f"{OUT}/parsed/capacitance_vna/{{group}}.npz",
    log:
        f"{OUT}/logs/parse/capacitance_vna/{{group}}.log",
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
        "{params.python} -m kinset parse capacitance_vna -o {output} {input.index:q} "
        "--devices {params.devices:q} 2> {log}"


rule extract_capacitance:
    input:
        parsed=PLAN.parsed("capacitance"),
        vna=PLAN.parsed_vna(),
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
        "-o {output.table} {input.parsed} {input.vna} {input.unlisted:q} 2> {log}"
