#!/usr/bin/env bash
# Seed the fuzz corpora (git-ignored) from the demo chains, the malformed test files
# and the fixtures; for the value target, every string value in those files plus a
# few edge cases. Run from anywhere: bash fuzz/seed.sh
set -euo pipefail
cd "$(dirname "$0")"
root=..
for target in chain_file plan; do
  mkdir -p "corpus/$target"
  cp "$root"/chains/*.json "$root"/tests/malformed/*.json "$root"/tests/fixtures/*.json "corpus/$target/"
done
mkdir -p corpus/value
n=0
for f in "$root"/chains/*.json "$root"/tests/malformed/*.json "$root"/tests/fixtures/*.json; do
  # Every "..." string value (after a colon) of the file, one corpus entry each.
  grep -o ': *"[^"]*"' "$f" | sed 's/^: *"//; s/"$//' | while IFS= read -r value; do
    printf '%s' "$value" > "corpus/value/$(printf '%s' "$value" | sha1sum | cut -c1-16)"
  done
done
for value in 4k7 4R7 0R22 1M5 2u2 "2µ2F" "0.1 μF" "4.7 kohm" "-20 dBu" "-10 dBV" "0.2 Vpk" \
             "1 Vpp" "50 mV rms" "25 C" "300 K" "-40 °C" 1e3 NaN inf 1e308k "" µ "250 mW" "1 kHz"; do
  printf '%s' "$value" > "corpus/value/$(printf '%s' "$value" | sha1sum | cut -c1-16)"
done
echo "corpus: $(ls corpus/chain_file | wc -l) chain files, $(ls corpus/value | wc -l) values"
