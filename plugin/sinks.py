"""Feature sinks that leave no partial file: the earlier file is kept until the run succeeds, and the
written layer is read back before the run reports success.

QGIS writes a sink in place, so it cannot be staged under a temporary name like the run's other files.
:func:`checked_sink` instead registers the destination with the run's :class:`OutputSet` before QGIS opens
it (a copy of an earlier file is restored when the run fails; a new file is removed), closes the sink at
the end so that every buffered feature reaches the file, and counts the features that can be read back:
a full disk that QGIS's writer does not report is caught there.
"""
from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator

from qgis.core import QgsFeatureSink, QgsProcessingException, QgsVectorLayer
from qgis.PyQt import sip

from ..algorithms import FieldcastError, current_output_set
from .destinations import destination_value, file_part

SHAPEFILE_COMPANIONS = (".shx", ".dbf", ".prj", ".cpg", ".qix")
"""The files QGIS writes beside a ``.shp`` (same stem)."""
REASON_LIMIT = 240
"""Characters of a provider's error message shown to the user."""
SPACE_ADVICE = "Check the disk space and that the file is writable, or choose another output file."


def add_feature(sink, feature, number: int, destination: str) -> None:
    """Add ``feature`` (the ``number``-th, from 1) to ``sink``, refusing to go on when the sink did not take it.

    Raises
    ------
    FieldcastError
        Naming the feature, ``destination`` and the sink's own error when it gives one.
    """
    if sink.addFeature(feature, QgsFeatureSink.FastInsert):
        return
    reason = sink.lastError() if hasattr(sink, "lastError") else ""
    raise FieldcastError(f"Could not write feature {number} to {destination}: {reason or 'no reason given'}. "
                         f"{SPACE_ADVICE}")


def file_set(path: str) -> list[str]:
    """The files a vector output at ``path`` consists of: a shapefile's companions, else the file itself."""
    stem, extension = os.path.splitext(path)
    if extension.lower() != ".shp":
        return [path]
    return [path, *(stem + (part if extension == ".shp" else part.upper()) for part in SHAPEFILE_COMPANIONS)]


def shortened(text: str, limit: int = REASON_LIMIT) -> str:
    """``text`` cut in the middle to at most about ``limit`` characters (a provider's error can quote whole SQL
    scripts; its start and its end, where the cause is, are kept)."""
    if len(text) <= limit:
        return text
    return f"{text[:limit // 2].rstrip()} … {text[-(limit // 2):].lstrip()}"


class SinkWriter:
    """Features into one sink, counted and checked one by one (:func:`add_feature`)."""

    def __init__(self, sink, destination: str) -> None:
        self.sink = sink
        self.destination = destination
        self.count = 0

    def add(self, feature) -> None:
        """Add one feature; raises :class:`FieldcastError` when the sink refuses it."""
        self.count += 1
        add_feature(self.sink, feature, self.count, self.destination)

    def close(self) -> None:
        """Write what the sink still buffers and close the file (the sink cannot be used afterwards)."""
        if not sip.isdeleted(self.sink):
            flushed = self.sink.flushBuffer()
            reason = self.sink.lastError() if hasattr(self.sink, "lastError") else ""
            sip.delete(self.sink)
            if not flushed:
                raise FieldcastError(f"Could not finish {self.destination}: {reason or 'no reason given'}. "
                                     f"{SPACE_ADVICE}")

    def check(self, parameter: str) -> None:
        """Read the closed file back; raises :class:`FieldcastError` unless it holds every feature added."""
        path = file_part(self.destination)
        if not path or not os.path.isfile(path):
            return  # a memory layer: nothing was written to disk
        layer = QgsVectorLayer(self.destination, "check", "ogr")
        found = layer.featureCount() if layer.isValid() else 0
        if found != self.count:
            raise FieldcastError(f"{parameter}: {path} was not written completely ({found} of {self.count} "
                                 f"features can be read back). {SPACE_ADVICE}")


@contextlib.contextmanager
def checked_sink(algorithm, parameters, name: str, context, fields, geometry_type, crs) -> Iterator[SinkWriter]:
    """The sink of output parameter ``name`` of ``algorithm`` for the block, then closed and read back.

    The named file is registered with the current :class:`OutputSet` before QGIS opens it, so a failure
    anywhere in the run restores the earlier file (or removes the new one).

    Raises
    ------
    FieldcastError
        If the file is read-only, a feature is refused, or the file does not hold every feature when closed.
    """
    path = destination_value(parameters.get(name))
    outputs = current_output_set()
    if path and outputs is not None:
        for part in file_set(path):
            outputs.protect(part)
    try:
        sink, destination = algorithm.parameterAsSink(parameters, name, context, fields, geometry_type, crs)
    except QgsProcessingException as exc:
        raise FieldcastError(f"Could not create {name} ({path or 'a temporary layer'}): {shortened(str(exc))}. "
                             f"{SPACE_ADVICE}") from exc
    if sink is None:
        raise QgsProcessingException(algorithm.invalidSinkError(parameters, name))
    writer = SinkWriter(sink, destination)
    try:
        yield writer
    except BaseException:
        with contextlib.suppress(FieldcastError):  # the first error is the one to show
            writer.close()  # the file must be closed before it is restored or removed
        raise
    writer.close()
    writer.check(name)
