#!/bin/sh
# Regenerates every data file in example_sequences/ byte for byte.
#   sh example_sequences/regenerate.sh [OUTDIR]     (default: this folder)
# Set SEQDIST to run another copy, e.g. SEQDIST="python -m seqdist.cli".
# README.md (the notes) is written by hand and is not regenerated.
set -eu
here=$(cd "$(dirname "$0")" && pwd)
out=${1:-$here}
mkdir -p "$out"
sd=${SEQDIST:-seqdist}

# (a) clean DNA: 30 taxa x 1200 columns, HKY85, gamma, a few indel runs
$sd --quiet simulate -o "$out/dna_clean.fasta" --tree-out "$out/dna_clean.true.nwk" \
    --summary-out "$out/dna_clean.sim.json" --taxa 30 --columns 1200 --alphabet dna --seed 11 \
    --model hky85 --kappa 4 --frequencies 0.3,0.2,0.2,0.3 --gamma 0.5/4 --branch-mean 0.05 --indels 0.005/3 \
    --label-prefix t

# (b) protein: 24 taxa x 360 columns, equal rates with uneven frequencies, gamma, indels;
#     its first 10 rows also as Stockholm with insert columns
$sd --quiet simulate -o "$out/protein.fasta" --tree-out "$out/protein.true.nwk" \
    --summary-out "$out/protein.sim.json" --stockholm-out "$out/protein_small.sto" --stockholm-taxa 10 \
    --taxa 24 --columns 360 --alphabet protein --seed 22 --model poisson-f --gamma 1/4 --branch-mean 0.08 \
    --indels 0.01/3 --label-prefix p

# (c) DNA with planted trouble: 30 taxa x 1200 columns, K80, gamma, indels; then a 70%-gap row,
#     a chimera of two distant taxa, and a pair on very long branches (past saturation)
$sd --quiet simulate -o "$out/dna_trouble.fasta" --tree-out "$out/dna_trouble.true.nwk" \
    --summary-out "$out/dna_trouble.sim.json" --taxa 30 --columns 1200 --alphabet dna --seed 3 \
    --model k80 --kappa 3 --gamma 1/4 --branch-mean 0.05 --indels 0.01/3 --label-prefix x \
    --gappy auto --gappy-fraction 0.7 --chimera auto --saturate auto --saturate-length 50
