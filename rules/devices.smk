# devices.csv: every device seen in any dataset, one row each.
# reel.json: the validated reel settings with defaults (accuracy for guard bands, reel
# facts for the report); an edit of reel.yaml reruns this and matching, not extraction.


rule devices:
    input:
        PLAN.dataset_tables(),
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


rule reel_settings:
    input:
        reel=PLAN.reel_yaml,
    output:
        settings=f"{OUT}/reel.json",
        # which reel folder these results belong to (kinset keep finds its ledger there)
        owner=f"{OUT}/reel_folder.txt",
    log:
        f"{OUT}/logs/reel_settings.log",
    params:
        python=PYTHON,
        version=VERSION,
        reel=reel_folder,
    threads: 1
    resources:
        mem_mb=500,
        runtime=5,
    conda:
        "../envs/kinset.yaml"
    shell:
        "{params.python} -m kinset check-reel --reel {params.reel:q} -o {output.settings} 2> {log}"
