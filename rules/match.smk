# Matching: one job per application profile. A changed profile reruns only this and
# what follows it; new data reruns it through devices.csv.


rule match:
    input:
        devices=f"{OUT}/devices.csv",
        reel=f"{OUT}/reel.json",
        # every extraction table, side tables too: quantities fall back on them
        # (single forward readings, measured capacitance points)
        tables=PLAN.tables(),
        profile=application_profile,
    output:
        sets=f"{OUT}/{{application}}/sets.csv",
        unmatched=f"{OUT}/{{application}}/unmatched.csv",
        values=f"{OUT}/{{application}}/values.csv",
        summary=f"{OUT}/{{application}}/summary.json",
    log:
        f"{OUT}/logs/match/{{application}}.log",
    params:
        python=PYTHON,
        version=VERSION,
        results=results_folder,
        out=output_folder,
    threads: 1
    resources:
        mem_mb=4000,
        runtime=30,
    conda:
        "../envs/kinset.yaml"
    shell:
        "{params.python} -m kinset match --results {params.results:q} "
        "--application {input.profile:q} -o {params.out:q} 2> {log}"
