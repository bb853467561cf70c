"""Architecture contracts from DESIGN.md, checked by running code, not by reading it."""

import subprocess
import sys
import textwrap


def test_core_never_imports_qt():
    # Import every core module with Qt and pyqtgraph blocked: any import of them fails loudly.
    code = textwrap.dedent(
        """
        import importlib, pkgutil, sys
        class Block:
            def find_spec(self, name, path=None, target=None):
                if name.split('.')[0] in ('PySide6', 'shiboken6', 'pyqtgraph', 'PyQt5', 'PyQt6'):
                    raise ImportError('core imported ' + name)
                if name.startswith('phasewake.app'):
                    raise ImportError('core imported ' + name)
        sys.meta_path.insert(0, Block())
        import phasewake.core as core
        for m in pkgutil.walk_packages(core.__path__, 'phasewake.core.'):
            importlib.import_module(m.name)
        print('ok')
        """
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip().endswith("ok")


def test_cli_help_does_not_import_qt():
    code = "import sys; from phasewake.app import cli; cli.build_parser(); print('PySide6' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip().splitlines()[-1] == "False"


def test_installed_as_namespaced_packages(tmp_path):
    # Run from an unrelated folder so the checkout itself is not on sys.path: the card's folders
    # must install as phasewake.core / phasewake.app, never as bare top-level core / app.
    code = (
        "import importlib.util as u; "
        "print(u.find_spec('phasewake.core') is not None, u.find_spec('core') is None, "
        "u.find_spec('app') is None)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["True", "True", "True"]
