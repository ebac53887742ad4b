# Report: one page per application (report.html), the SPICE cards of the placed parts
# (models.lib) and the pick list in tape order (pick_list.csv). A changed profile reruns
# matching and then this; new data reruns it through the match outputs and tables.


rule report:
    input:
        sets=f"{OUT}/{{application}}/sets.csv",
        unmatched=f"{OUT}/{{application}}/unmatched.csv",
        values=f"{OUT}/{{application}}/values.csv",
        summary=f"{OUT}/{{application}}/summary.json",
        scan=f"{OUT}/{{application}}/tolerance_scan.csv",
        circuit=f"{OUT}/{{application}}/circuit.csv",
        devices=f"{OUT}/devices.csv",
        reel=f"{OUT}/reel.json",
        tables=PLAN.tables(),
        profile=application_profile,
    output:
        page=report(
            f"{OUT}/{{application}}/report.html",
            category="Matched sets",
            subcategory="{application}",
            labels={"reel": "{reel}", "application": "{application}", "file": "report page"},
        ),
        models=report(
            f"{OUT}/{{application}}/models.lib",
            category="Matched sets",
            subcategory="{application}",
            labels={"reel": "{reel}", "application": "{application}", "file": "SPICE models"},
        ),
        picks=report(
            f"{OUT}/{{application}}/pick_list.csv",
            category="Matched sets",
            subcategory="{application}",
            labels={"reel": "{reel}", "application": "{application}", "file": "pick list"},
        ),
    log:
        f"{OUT}/logs/report/{{application}}.log",
    params:
        python=PYTHON,
        version=VERSION,
        results=results_folder,
    threads: 1
    resources:
        mem_mb=2000,
        runtime=10,
    conda:
        "../envs/kinset.yaml"
    # The output folder is results/<reel>/<application>, where the match rule wrote
    # its tables (the report reads them from there).
    shell:
        "{params.python} -m kinset report --results {params.results:q} "
        "--application {input.profile:q} -o {params.results:q}/{wildcards.application:q} "
        "2> {log}"
