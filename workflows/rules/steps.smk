# One rule per step of the job, made from seqdist.pipeline.STEPS (the list `seqdist run` runs):
# each declares exactly the files its step reads and the files it always writes, and takes
# only the options its step uses, so changing one reruns only the steps that use it.
import re

include: "resources.py"

wildcard_constraints:
    name="|".join(re.escape(name) for name in ALIGNMENTS),


def _reads(step):
    def files(wildcards):
        return pipeline.step_files(step, ALIGNMENTS[wildcards.name], os.path.join(OUT, wildcards.name),
                                   JOBS[wildcards.name])[0]
    return files


def _writes(step):
    # what a step writes depends on the options only (the same for every alignment)
    paths = pipeline.step_files(step, "-", os.path.join(literal(OUT), "{name}"), {**OPTIONS, "truth": None})[1]
    return [report(p, caption="../report/report.rst", category="reports", labels={"alignment": "{name}"})
            if p.endswith(FILES["report"]) else p for p in paths]


def _resource(step, key):
    # from the alignment itself (always there, unlike the step's other inputs), so that a dry run
    # and a cluster scheduler know every job's request before anything runs
    def value(wildcards, attempt):
        shape = alignment_shape(ALIGNMENTS[wildcards.name], config["alphabet"])
        return step_resources(step, shape, attempt, config)[key]
    return value


for _step in pipeline.STEPS:
    rule:
        name: _step.name
        input: _reads(_step)
        output: _writes(_step)
        params:
            alignment=lambda wildcards: ALIGNMENTS[wildcards.name],
            outdir=lambda wildcards: os.path.join(OUT, wildcards.name),
            step=_step.name,
            options=pipeline.step_arguments(_step, OPTIONS),
        log: os.path.join(literal(OUT), "logs", "{name}", f"{_step.name}.log")
        benchmark: os.path.join(literal(OUT), "benchmarks", "{name}", f"{_step.name}.tsv")
        threads: config["threads"][_step.name]
        resources:
            mem_mb=_resource(_step.name, "mem_mb"),
            runtime=_resource(_step.name, "runtime"),
        conda: "../envs/seqdist.yaml"
        shell:
            "OMP_NUM_THREADS={threads} seqdist run {params.alignment:q} --outdir {params.outdir:q} "
            "--step {params.step:q} --workers {threads} {params.options:q} 2> {log:q}"
