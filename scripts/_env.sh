# Shared by scripts/run and scripts/test: make sure .venv exists and holds the
# project with its test tools. Re-installs only when pyproject.toml changed.
set -euo pipefail
ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
VENV="$ROOT/.venv"
PY="${SEQAUDIT_PYTHON:-python3}"
if [ ! -x "$VENV/bin/python" ]; then
  echo "creating $VENV" >&2
  "$PY" -m venv "$VENV"
fi
STAMP="$VENV/.seqaudit-installed"
WANT="$(sha256sum "$ROOT/pyproject.toml" | cut -d' ' -f1)"
if [ ! -f "$STAMP" ] || [ "$(cat "$STAMP")" != "$WANT" ]; then
  echo "installing seqaudit and its dependencies into $VENV" >&2
  "$VENV/bin/python" -m pip install --quiet --disable-pip-version-check --upgrade pip >&2
  "$VENV/bin/python" -m pip install --quiet --disable-pip-version-check -e "$ROOT[dev]" >&2
  echo "$WANT" > "$STAMP"
fi
export PATH="$VENV/bin:$PATH"
cd "$ROOT"
