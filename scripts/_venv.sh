# Shared set-up: create or refresh .venv/ in the repository and install limbtrace into it.
# Sourced by scripts/demo and scripts/test; $1 is the pip extra ("" or "test").
set -euo pipefail
repo="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
venv="$repo/.venv"
py="${PYTHON:-python3}"
if [ ! -x "$venv/bin/python" ]; then
  "$py" -m venv "$venv"
fi
stamp="$venv/.installed-${1:-base}"
if [ ! -f "$stamp" ] || [ "$repo/pyproject.toml" -nt "$stamp" ]; then
  "$venv/bin/python" -m pip install --quiet --disable-pip-version-check --upgrade pip >/dev/null 2>&1 || true
  if [ -n "${1:-}" ]; then
    "$venv/bin/python" -m pip install --quiet --disable-pip-version-check -e "$repo[$1]"
  else
    "$venv/bin/python" -m pip install --quiet --disable-pip-version-check -e "$repo"
  fi
  touch "$stamp"
fi
export PATH="$venv/bin:$PATH"
