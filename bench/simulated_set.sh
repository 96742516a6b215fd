# Sourced by the throughput benchmarks: the same 1,000 images and model for scan and the queue.
# simulated_set RESIDUE WORK makes WORK/images (tests/cli/make_labelled.py: 256 px scikit-image
# photo crops and SIMULATED upsampling output, half JPEG q90, half PNG) and WORK/model.json
# (trained on a separate simulated set), and sets n to the number of images.
simulated_set() {
  local residue=$1 work=$2 here
  here=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
  rm -rf "$work" && mkdir -p "$work"
  /usr/bin/python3 "$here/tests/cli/make_labelled.py" "$work/train" 1 jpeg png 40
  /usr/bin/python3 "$here/tests/cli/make_labelled.py" "$work/images" 9 jpeg png 500
  "$residue" train "$work/train" -o "$work/model.json" --no-cache > /dev/null 2>&1
  n=$(find "$work/images" -type f | wc -l)
}
