# Sourced by demo.sh and test.sh: create or reuse .venv and install lintext into it.
# Usage: source scripts/env.sh [EXTRA]   (EXTRA: "test" installs the test extra too; "test,cluster" also Dask)
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
extra=${1:-}
py=${PYTHON:-python3}
if ! command -v "$py" >/dev/null 2>&1; then echo "lintext: needs Python 3.10+ as python3" >&2; exit 2; fi
"$py" -c 'import sys; sys.exit(sys.version_info < (3, 10))' || { echo "lintext: needs Python 3.10 or newer" >&2; exit 2; }
if [ ! -x "$root/.venv/bin/python" ]; then
  "$py" -m venv "$root/.venv"
fi
venv_py="$root/.venv/bin/python"
# Reinstall only when pyproject.toml or the requested extra changed.
stamp="$root/.venv/.lintext-installed"
want="$(cat "$root/pyproject.toml" | cksum)-$extra"
if [ ! -f "$stamp" ] || [ "$(cat "$stamp")" != "$want" ]; then
  spec="$root"; [ -n "$extra" ] && spec="$root[$extra]"
  "$venv_py" -m pip install --quiet --upgrade pip >/dev/null 2>&1 || true
  "$venv_py" -m pip install --quiet -e "$spec"
  echo "$want" > "$stamp"
fi
export PATH="$root/.venv/bin:$PATH"
