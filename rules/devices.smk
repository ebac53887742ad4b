# devices.csv: every device seen in any dataset, one row each.


rule devices:
    input:
        [f"{OUT}/{d}.csv" for d in PLAN.datasets],
    output:
        f"{OUT}/devices.csv",
    log:
        f"{OUT}/logs/devices.log",
    params:
        python=PYTHON,
        version=VERSION,
    threads: 1
    resources:
        mem_mb=1000,
        runtime=10,
    conda:
        "../envs/kinset.yaml"
    shell:
        "{params.python} -m kinset devices -o {output} {input} 2> {log}"
