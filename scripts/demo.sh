#!/usr/bin/env bash
# The demo reduction of the simulated sequence in demo-frames/ (see its
# README): the whole pipeline, in order, products in OUT.
#   scripts/demo.sh GLOAM_BINARY OUT_FOLDER
set -euo pipefail
gloam=${1:-build/src/cli/gloam}
out=${2:-demo-run}
frames=demo-frames
fwhm=4.05       # the PSF's FWHM in pixels, as step 1 measures it on psf.fits (4.048)
mkdir -p "$out"
# the candidate columns worth reading on a terminal
brief() { cut -d, -f1,4,6,10,11,12 "$1" | sed 's/,/\t/g'; }

echo "== 1. what the sequence holds"
"$gloam" inspect "$frames/cube.fits" --angles "$frames/angles.txt" --psf "$frames/psf.fits"

echo
echo "== 2. star centring (method chosen from the data) and angles from the headers"
# the angles of the aligned frames are stored in aligned.fits (its ANGLES
# table, read by later commands without --angles) and also written as text
"$gloam" align "$frames/cube.fits" --out "$out/aligned.fits" --table "$out/starpos.csv" \
  --method auto --angles-from-header --angles-out "$out/angles.txt" --overwrite
cube="$out/aligned.fits"
angles="$out/angles.txt"

echo
echo "== 3. classical ADI (median frame subtracted), for comparison"
"$gloam" subtract "$cube" --angles "$angles" --fwhm "$fwhm" \
  --mask-radius 6 --method median-frame --out "$out/adi.fits" --overwrite
# no --fwhm: detect reads the FWHM that subtract recorded in adi.fits
"$gloam" detect "$out/adi.fits" --mask-radius 6 --out "$out/adi" --overwrite

echo
echo "== 4. KLIP ring by ring: 5, 10 and 20 modes, references where the sky turned by at least 0.75 FWHM"
"$gloam" subtract "$cube" --angles "$angles" --fwhm "$fwhm" \
  --mask-radius 6 --method klip-rings --gap 0.75 --modes 5,10,20 --out "$out/klip.fits" --overwrite

echo
echo "== 5. detection in the 5-mode image (5 sigma, small-sample statistics)"
"$gloam" detect "$out/klip.fits" --fwhm auto --plane 1 --mask-radius 6 \
  --out "$out/klip" --every-plane --skip-flanking --overwrite
echo "found ($out/klip.candidates.csv):"
brief "$out/klip.candidates.csv"
echo "planted in the simulation ($frames/truth.csv):"
cut -d, -f1-3 "$frames/truth.csv" | sed 's/,/\t/g'

echo
echo "== 6. contrast curve calibrated with fake companions, and the candidates' contrast"
"$gloam" limits "$cube" --angles "$angles" --psf "$frames/psf.fits" \
  --fwhm "$fwhm" --mask-radius 6 --method klip-rings --gap 0.75 --modes 5 \
  --candidates "$out/klip.candidates.csv" \
  --out "$out/klip5" --overwrite

echo "contrast of the candidates ($out/klip5.companions.csv), against the planted values above:"
cut -d, -f1,4,6,12,13 "$out/klip5.companions.csv" | sed 's/,/\t/g'

echo
echo "== 7. vetting the candidates: negative fake companion fit with errors, tests of speckle or planet"
# full-frame KLIP in each candidate's annulus keeps this step short (a minute
# of CPU); two error fakes and 50 evaluations per fit are for the demo only
"$gloam" vet "$cube" --angles "$angles" --psf "$frames/psf.fits" \
  --fwhm "$fwhm" --mask-radius 6 --method klip-frame --modes 5 \
  --candidates "$out/klip.candidates.csv" --error-fakes 2 --max-evaluations 50 \
  --out "$out/klip" --overwrite --quiet
echo "fitted ($out/klip.vet.csv; figures klip.vet-N.png), against the planted values above:"
cut -d, -f1-5,12,13,30,31 "$out/klip.vet.csv" | sed 's/,/\t/g'

echo
echo "products in $out/: aligned.fits, starpos.csv, klip.fits (north-up, one plane per mode count), klip.snr.fits"
echo "and klip.snr.png (S/N maps), klip.candidates.csv, klip5.limits.csv/.png/.svg"
echo "(contrast curve; the two candidates are left out of its noise estimate and kept away from its fakes),"
echo "klip.vet.csv/.fits/.reg and klip.vet-N.png/.svg (position, contrast and tests of each candidate)"

echo
echo "== 8. the whole reduction again from one plan (demo-frames/plan.ini): run folder, summary, report"
"$gloam" run "$frames/plan.ini" --out "$out/run"
echo "open $out/run/report.html; a second 'gloam run' skips every unchanged step"
