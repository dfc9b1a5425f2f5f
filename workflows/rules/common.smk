# Settings, the alignments and the results folder, checked before any rule runs.
#
# Nothing from the settings or from a file name is ever run as shell code: every setting is
# checked against the schema (choices, ranges), and every value a rule puts into its command
# is quoted for the shell ({...:q}).
import os
import sys

import yaml
from snakemake.utils import validate

from seqdist import pipeline
from seqdist.core.errors import InputError

FILES = pipeline.FILES
WORKFLOW_DIR = workflow.basedir
DEFAULT_CONFIG = os.path.join(WORKFLOW_DIR, "config", "config.yaml")
SCHEMA = os.path.join(WORKFLOW_DIR, "schemas", "config.schema.yaml")
#: Written into the results folder when the workflow starts: a folder with results and
#: without it was written by `seqdist run`, and the workflow refuses it.
MARK = ".seqdist-workflow"

configfile: DEFAULT_CONFIG


def stop(message):
    sys.stderr.write(f"seqdist workflow: error: {message}\n")
    sys.exit(2)


def literal(path):
    """A path taken literally in a Snakemake pattern (braces doubled)."""
    return str(path).replace("{", "{{").replace("}", "}}")


def _check_config():
    import jsonschema

    with open(SCHEMA) as fh:
        schema = yaml.safe_load(fh)
    # the first problem in one line, naming the key (snakemake's message below is longer)
    for err in sorted(jsonschema.Draft202012Validator(schema).iter_errors(config), key=lambda e: list(e.path)):
        key = ".".join(str(p) for p in err.path) or "(top level)"
        stop(f"config {key}: {err.message} (schema: workflows/schemas/config.schema.yaml)")
    validate(config, SCHEMA)  # fills in the schema's defaults


def _input_dir():
    """input_dir as an absolute path: relative to the folder of the config file that sets it, or,
    given with --config on the command line, to the working directory."""
    value = str(config["input_dir"])
    if os.path.isabs(value):
        return value
    if "input_dir" in workflow.config_settings.config:
        return os.path.abspath(value)
    base = os.path.dirname(DEFAULT_CONFIG)
    for path in workflow.config_settings.configfiles:  # --configfile, in order: the last one wins
        with open(path) as fh:
            if "input_dir" in (yaml.safe_load(fh) or {}):
                base = os.path.dirname(os.path.abspath(path))
    return os.path.normpath(os.path.join(base, value))


def flag(value):
    """A yes/no setting: YAML's true/false, or the words (--config turns True, not true, into a boolean)."""
    return value is True or value == "true"


def _check_results(out):
    """Refuse a results folder that `seqdist run` wrote (its manifest.json, without our mark)."""
    if not os.path.isdir(out) or os.path.exists(os.path.join(out, MARK)):
        return
    for folder in [out] + sorted(os.path.join(out, d) for d in os.listdir(out)):
        if os.path.isfile(os.path.join(folder, FILES["manifest"])):
            stop(f"{out}: written by 'seqdist run' ({os.path.join(folder, FILES['manifest'])}); the workflow "
                 "keeps its own results folder: choose another (--config results=...)")


_check_config()
IN = _input_dir()
OUT = os.path.normpath(str(config["results"]))
_check_results(OUT)
#: The job's options, as seqdist.pipeline takes them.
OPTIONS = {
    "alphabet": config["alphabet"],
    "model": None if config["model"] == "auto" else config["model"],
    "gamma": config["gamma"],
    "gaps": config["gaps"],
    "objective": config["objective"],
    "weighted": None if config["weighted"] == "auto" else flag(config["weighted"]),
    "method": config["method"],
    "seed": int(config["seed"]),
    "bootstrap": int(config["bootstrap"]),
    "time_limit": config["time_limit"],
    "keep_suspects": flag(config["keep_suspects"]),
    "keep_unmeasured": flag(config["keep_unmeasured"]),
}
try:
    # name -> path, relative to the working directory so that no data file holds an absolute path
    # (the manifest and the report name the alignment as `seqdist run` run from here would)
    ALIGNMENTS = {name: os.path.relpath(path) for name, path in pipeline.find_alignments(IN).items()}
    if not ALIGNMENTS:
        raise InputError(f"{IN}: no alignment found (by extension or first line)")
    JOBS = {name: pipeline.job_options(path, **OPTIONS) for name, path in ALIGNMENTS.items()}
except InputError as exc:
    stop(str(exc))


onstart:
    os.makedirs(OUT, exist_ok=True)
    with open(os.path.join(OUT, MARK), "w") as fh:
        fh.write("results of the seqdist workflow (workflows/Snakefile); seqdist run never writes here\n")
