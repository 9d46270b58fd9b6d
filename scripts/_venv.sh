# Shared set-up: create or refresh .venv/ in the repository and install limbtrace into it.
# Sourced by scripts/demo and scripts/test; $1 is the pip extra ("" or "test").
set -euo pipefail
repo="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
venv="$repo/.venv"
py="${PYTHON:-python3}"
if [ ! -x "$venv/bin/python" ]; then
  echo "setting up $venv (first run: about a minute) ..."
  "$py" -m venv "$venv"
fi
stamp="$venv/.installed-${1:-base}"
if [ ! -f "$stamp" ] || [ "$repo/pyproject.toml" -nt "$stamp" ]; then
  log="$venv/pip-install.log"
  target="$repo"
  [ -n "${1:-}" ] && target="$repo[$1]"
  "$venv/bin/python" -m pip install --disable-pip-version-check --upgrade pip >"$log" 2>&1 \
    || true  # an old pip still installs the wheels
  if ! "$venv/bin/python" -m pip install --disable-pip-version-check -e "$target" \
       >>"$log" 2>&1; then
    tail -n 30 "$log" >&2
    echo "installing limbtrace into $venv failed; the whole log: $log" >&2
    exit 1
  fi
  touch "$stamp"
fi
export PATH="$venv/bin:$PATH"
