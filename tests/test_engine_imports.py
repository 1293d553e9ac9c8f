"""The engine never imports Textual: checked in a fresh interpreter."""

import subprocess
import sys


def test_engine_does_not_import_textual():
    code = (
        "import sys\n"
        "import holdfast.cli, holdfast.scan, holdfast.journal, holdfast.export, holdfast.insight.build\n"
        "import holdfast.engine.loo, holdfast.learners.svm, holdfast.data.prepare\n"
        "bad = sorted(m for m in sys.modules if m == 'textual' or m.startswith('textual.'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
