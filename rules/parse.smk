# Parsing: each input file (or stable bucket of files) is read once into SI arrays.
# One job per file, never per device: the scheduler's cost grows with the job count.


rule parse:
    input:
        bucket_inputs,
    output:
        f"{OUT}/parsed/{{dataset}}/{{bucket}}.npz",
    log:
        f"{OUT}/logs/parse/{{dataset}}/{{bucket}}.log",
    params:
        python=PYTHON,
        version=VERSION,
    threads: 1
    resources:
        mem_mb=parse_memory,
        runtime=10,
    conda:
        "../envs/kinset.yaml"
    shell:
        "{params.python} -m kinset parse {wildcards.dataset} -o {output} {input} 2> {log}"
