# Reverse leakage: current at the report voltages, breakdown voltage and a shunt plus
# generation model of every device, normalised to the reference temperature.


rule extract_leakage:
    input:
        parsed=PLAN.parsed("leakage"),
        # ancient(): only the settings this step uses (params.settings) trigger a rerun,
        # not an edit elsewhere in reel.yaml.
        reel=ancient(PLAN.reel_yaml),
    output:
        table=f"{OUT}/leakage.csv",
    log:
        f"{OUT}/logs/extract_leakage.log",
    params:
        python=PYTHON,
        version=VERSION,
        reel=reel_folder,
        settings=PLAN.settings_digest("leakage"),
    threads: 1
    resources:
        mem_mb=PLAN.extract_memory_mb("leakage"),
        runtime=20,
    conda:
        "../envs/kinset.yaml"
    shell:
        "{params.python} -m kinset extract leakage --reel {params.reel:q} "
        "-o {output.table} {input.parsed} 2> {log}"
