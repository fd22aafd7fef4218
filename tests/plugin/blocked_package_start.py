"""Start the plugin with one package made unimportable and print, as JSON, what it reports.

Run as a script by tests/plugin/test_plugin_requirements.py, one process per blocked package (a
package once imported cannot be unloaded). Argument: the top-level module to block (e.g. ``scipy``).
A ``sys.meta_path`` finder refuses it before anything is imported, as if it were not installed.
"""
from __future__ import annotations

import importlib.abc
import json
import os
import sys
from pathlib import Path


class Blocker(importlib.abc.MetaPathFinder):
    """Refuses to import ``package`` and its submodules."""

    def __init__(self, package: str) -> None:
        self.package = package

    def find_spec(self, fullname, path, target=None):
        if fullname == self.package or fullname.startswith(self.package + "."):
            raise ModuleNotFoundError(f"No module named {fullname!r} (blocked by the test)", name=fullname)
        return None


class MessageBar:
    """Stands in for ``iface.messageBar()``: records what is pushed."""

    def __init__(self) -> None:
        self.messages: list[str] = []

    def pushMessage(self, title, text, level=None, duration=None) -> None:
        self.messages.append(f"{title}: {text}")


class Interface:
    """Stands in for QGIS's ``iface``: only the message bar."""

    def __init__(self) -> None:
        self.bar = MessageBar()

    def messageBar(self) -> MessageBar:
        return self.bar


def main(package: str) -> None:
    sys.meta_path.insert(0, Blocker(package))
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
    from qgis.core import QgsApplication

    from repo_package import load_repo_package

    QgsApplication.setPrefixPath("/usr", True)
    app = QgsApplication([], False)
    app.initQgis()
    log: list[str] = []
    QgsApplication.messageLog().messageReceived.connect(lambda text, tag, level: log.append(f"{tag}: {text}"))
    iface = Interface()
    plugin = load_repo_package().classFactory(iface)
    plugin.initGui()
    provider = QgsApplication.processingRegistry().providerById("fieldcast")
    print(json.dumps({"plugin": type(plugin).__name__, "algorithms": len(provider.algorithms()),
                      "provider": provider.longName(), "log": log, "message_bar": iface.bar.messages}))
    plugin.unload()
    app.exitQgis()


if __name__ == "__main__":
    main(sys.argv[1])
