# Forward V-I: fit IS, N, RS of every device, reported at the reference temperature.


rule extract_forward:
    input:
        parsed=PLAN.parsed("forward"),
        # ancient(): only the settings this step uses (params.settings) trigger a rerun,
        # not an edit elsewhere in reel.yaml.
        reel=ancient(PLAN.reel_yaml),
    output:
        table=f"{OUT}/forward.csv",
        readings=f"{OUT}/forward_readings.csv",
    log:
        f"{OUT}/logs/extract_forward.log",
    params:
        python=PYTHON,
        version=VERSION,
        reel=reel_folder,
        settings=PLAN.settings_digest("forward"),
    threads: 1
    resources:
        mem_mb=PLAN.extract_memory_mb("forward"),
        runtime=20,
    conda:
        "../envs/kinset.yaml"
    shell:
        "{params.python} -m kinset extract forward --reel {params.reel:q} "
        "-o {output.table} {input.parsed} 2> {log}"
