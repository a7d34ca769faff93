import importlib.util
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

if importlib.util.find_spec("probelog") is not None and importlib.util.find_spec("probelog.drivers") is None:
    raise SystemExit(
        "probelog.drivers is not importable: this venv was installed before drivers/ and tui/ "
        "became probelog.drivers and probelog.tui; reinstall it with `make .venv/.installed`"
    )
