# Reverse recovery: trr, ta, tb, Irrm, Qrr, softness and the transit time TT of every
# waveform, by the end rule of reel.yaml (recovery.end).


rule extract_recovery:
    input:
        parsed=PLAN.parsed("recovery"),
        # ancient(): only the settings this step uses (params.settings) trigger a rerun,
        # not an edit elsewhere in reel.yaml.
        reel=ancient(PLAN.reel_yaml),
    output:
        table=f"{OUT}/recovery.csv",
    log:
        f"{OUT}/logs/extract_recovery.log",
    params:
        python=PYTHON,
        version=VERSION,
        reel=reel_folder,
        settings=PLAN.settings_digest("recovery"),
    threads: 1
    resources:
        mem_mb=PLAN.extract_memory_mb("recovery"),
        runtime=20,
    conda:
        "../envs/kinset.yaml"
    shell:
        "{params.python} -m kinset extract recovery --reel {params.reel:q} "
        "-o {output.table} {input.parsed} 2> {log}"
