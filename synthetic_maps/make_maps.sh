#!/bin/sh
# Regenerate the demo synthetic maps of this folder from the configs in ../configs.
#   sh synthetic_maps/make_maps.sh            (from the repository root)
#   sh synthetic_maps/make_maps.sh --check    (regenerate, then compare with SHA256SUMS)
set -e
cd "$(dirname "$0")"
for name in survey_a survey_b survey_pol isotropic e1 e2 dodecahedral lens; do
    topology synth "../configs/synth_$name.toml" --out "$name.fits" --preview "$name.png" \
        --pairs "$name.json" --force
done
if [ "$1" = "--check" ]; then
    sha256sum -c SHA256SUMS
fi
