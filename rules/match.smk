# Matching: one job per application profile, in reel.yaml's priority order: each job
# reads the sets of the applications before it (their parts are not offered to it) and the
# reel's ledger (kept sets stay as they are; retired parts are never offered). A changed
# profile reruns only its own job and the applications after it; new data or a changed
# ledger reruns them all.
#
# The same job then simulates every set in the profile's reference circuit (kinset circuit:
# circuit.csv, and the circuit_limits column of sets.csv). It runs here, not in a rule of
# its own, because it adds a column to sets.csv: one job writes each file, and a rerun
# with nothing new stays a no-op. Without ngspice it writes a note and the run goes on.


rule match:
    input:
        devices=f"{OUT}/devices.csv",
        reel=f"{OUT}/reel.json",
        # every extraction table, side tables too: quantities fall back on them
        # (single forward readings, measured capacitance points)
        tables=PLAN.tables(),
        profile=application_profile,
        earlier=earlier_sets,
        ledger=ledger_inputs,
    output:
        sets=f"{OUT}/{{application}}/sets.csv",
        unmatched=f"{OUT}/{{application}}/unmatched.csv",
        values=f"{OUT}/{{application}}/values.csv",
        summary=f"{OUT}/{{application}}/summary.json",
        scan=f"{OUT}/{{application}}/tolerance_scan.csv",
        circuit=f"{OUT}/{{application}}/circuit.csv",
    log:
        f"{OUT}/logs/match/{{application}}.log",
    params:
        python=PYTHON,
        version=VERSION,
        results=results_folder,
        out=output_folder,
        ledger=PLAN.ledger,
        order=match_options,
    # matching is one thread; the circuit step runs its simulator chunks two at a time
    threads: 2
    resources:
        mem_mb=4000,
        runtime=30,
    conda:
        "../envs/kinset.yaml"
    shell:
        "{params.python} -m kinset match --results {params.results:q} "
        "--application {input.profile:q} -o {params.out:q} --ledger {params.ledger:q}"
        "{params.order} 2> {log} && "
        "{params.python} -m kinset circuit --results {params.results:q} "
        "--application {input.profile:q} -o {params.out:q} --threads {threads} 2>> {log}"
