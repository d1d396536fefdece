#!/usr/bin/env bash
# scripts/python prints the module's directory and runs Python with it; scripts/install
# writes a .pth file that makes `import apsides` work without PYTHONPATH.
# Usage: scripts_test.sh BUILD_DIR SCRATCH_DIR
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
export APSIDES_BUILD_DIR=$1
scratch=$2
rm -rf "$scratch" && mkdir -p "$scratch"
unset PYTHONPATH
dir=$("$root/scripts/python")
[[ "$dir" == "$APSIDES_BUILD_DIR/python" ]] || { echo "scripts/python printed '$dir'"; exit 1; }
PYTHONPATH=$dir /usr/bin/python3 -c 'import apsides; assert apsides.solve_kepler(0.0, 0.5) == 0.0'
"$root/scripts/python" -c 'import apsides, sys; print("apsides", apsides.__version__, "from", apsides.__file__)'
"$root/scripts/install" --site-dir "$scratch/site"
[[ "$(cat "$scratch/site/apsides.pth")" == "$dir" ]]
/usr/bin/python3 -c 'import site, sys; site.addsitedir(sys.argv[1]); import apsides; assert apsides.__file__.startswith(sys.argv[2])' \
  "$scratch/site" "$dir"
"$root/scripts/install" --uninstall --site-dir "$scratch/site"
[[ ! -e "$scratch/site/apsides.pth" ]]
echo "scripts/python and scripts/install: OK"
