"""Side inputs: bounded reads of small files, and a guarded YAML loader.

Every side input (measurement map, odometry config, camera file, survey,
detections, limits file, baseline block) is read through :func:`read_side_file`:
it must be a regular file (not a folder, FIFO, socket or device such as
``/dev/zero``) no larger than a stated cap, and it is read in one bounded
read, so a hostile path can neither hang a run nor grow its memory.

YAML is read by :func:`read_yaml` with :class:`GuardedLoader`, a safe loader
that refuses

- documents of more than ``MAX_NODES`` nodes, counting each alias use as the
  whole collection it names (an "alias bomb"), and recursive aliases;
- nesting deeper than ``MAX_DEPTH`` levels;
- integers of more than ``MAX_INT_DIGITS`` digits;

and reads numbers by the YAML 1.2 core schema, so every common spelling is a
number: ``1e3``, ``1.0e-6``, ``.5``, ``+2``, ``1_000``, ``0x1F``, ``0o17``, and
``.inf``/``-.inf``/``.nan`` or ``inf``/``-inf``/``nan`` (read as floats, then
refused as "not a finite number" wherever a reader needs a finite one). A
leading zero does not make a number octal (``010`` is ten), ``1:30`` is text
(not sexagesimal) and only ``true``/``false`` are booleans (``on``, ``no`` and
``y`` are text), as in YAML 1.2.
"""

from __future__ import annotations

import os
import re
import stat
from pathlib import Path

import yaml

from ..errors import InputError

YAML_CAP = 4 << 20
"""Largest YAML side file read, bytes (4 MiB; a noisecal block is tens of kB)."""

TABLE_CAP = 1 << 30
"""Largest CSV side table (survey, detections) read, bytes (1 GiB)."""

MAX_DEPTH = 100
"""Deepest nesting of YAML collections accepted (our layouts use fewer than 10)."""

MAX_NODES = 200_000
"""Most YAML nodes a document may expand to with its aliases counted in full."""

MAX_INT_DIGITS = 40
"""Longest YAML integer accepted, digits (a 128-bit integer has 39)."""


def _cap_text(cap: int) -> str:
    return f"{cap >> 30} GiB" if cap >= 1 << 30 else f"{cap >> 20} MiB"


def read_side_file(path: str | Path, what: str, cap: int) -> bytes:
    """The bytes of a side input, refused unless a regular file of at most ``cap`` bytes.

    Parameters
    ----------
    path : str or Path
        The file as the user named it.
    what : str
        What the file is, for messages (e.g. ``"map file"``).
    cap : int
        Largest size accepted, bytes.

    Returns
    -------
    bytes
        The whole file.

    Raises
    ------
    InputError
        Missing, a folder, a FIFO or device, unreadable, or larger than ``cap``;
        one line naming the file.
    """
    path = Path(path)
    try:
        # Non-blocking: opening a FIFO with no writer must not wait for one.
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) |
                     getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError:
        raise InputError(f"{path}: no such {what}; check the path") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a folder, not a {what}; give the file") from None
    except PermissionError:
        raise InputError(f"{path}: permission denied; make the {what} readable") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot open the {what} ({exc.strerror or exc}); "
                         "check the path") from None
    try:
        info = os.fstat(fd)
        if stat.S_ISDIR(info.st_mode):
            raise InputError(f"{path}: is a folder, not a {what}; give the file")
        if not stat.S_ISREG(info.st_mode):
            raise InputError(f"{path}: is not a regular file (a FIFO, socket or device); "
                             f"give the {what} as a file on disk")
        if info.st_size > cap:
            raise InputError(f"{path}: the {what} is {info.st_size} bytes, over the "
                             f"{_cap_text(cap)} noisecal reads; check that this is the "
                             "right file")
        os.set_blocking(fd, True)
        with os.fdopen(fd, "rb", closefd=True) as fh:
            fd = None
            data = fh.read(cap + 1)  # a file that grows while read is still bounded
    except OSError as exc:
        raise InputError(f"{path}: cannot read the {what} ({exc.strerror or exc})") from None
    finally:
        if fd is not None:
            os.close(fd)
    if len(data) > cap:
        raise InputError(f"{path}: the {what} is over the {_cap_text(cap)} noisecal reads; "
                         "check that this is the right file")
    return data


class _Refused(yaml.YAMLError):
    """A document the guarded loader will not build; ``mark`` is where."""

    def __init__(self, text: str, mark=None):
        super().__init__(text)
        self.text = text
        self.problem_mark = mark


_DIGITS = r"[0-9](?:_?[0-9])*"
_INT = re.compile(rf"^(?:[-+]?{_DIGITS}|0o[0-7](?:_?[0-7])*|0x[0-9a-fA-F](?:_?[0-9a-fA-F])*)$")
_FLOAT = re.compile(
    rf"^(?:[-+]?(?:\.{_DIGITS}|{_DIGITS}(?:\.(?:{_DIGITS})?)?)(?:[eE][-+]?{_DIGITS})?"
    r"|[-+]?\.?(?:inf|Inf|INF)|\.?(?:nan|NaN|NAN))$")
_BOOL = re.compile(r"^(?:true|True|TRUE|false|False|FALSE)$")


if yaml.__with_libyaml__:
    from yaml._yaml import CParser

    class _Base(yaml.composer.Composer, CParser, yaml.constructor.SafeConstructor,
                yaml.resolver.Resolver):
        """libyaml's parser (4-5x faster) under Python's composer, whose steps the
        guards below hook into."""

        def __init__(self, stream):
            CParser.__init__(self, stream)
            yaml.composer.Composer.__init__(self)
            yaml.constructor.SafeConstructor.__init__(self)
            yaml.resolver.Resolver.__init__(self)
else:  # pragma: no cover - PyYAML built without libyaml
    _Base = yaml.SafeLoader


class GuardedLoader(_Base):
    """A safe YAML loader with YAML 1.2 core numbers and bounds on size and depth.

    See the module docstring for what it refuses and how it reads numbers.
    """

    yaml_implicit_resolvers = {
        key: [(tag, rx) for tag, rx in resolvers
              if tag not in ("tag:yaml.org,2002:int", "tag:yaml.org,2002:float",
                             "tag:yaml.org,2002:bool")]
        for key, resolvers in yaml.SafeLoader.yaml_implicit_resolvers.items()}

    def __init__(self, stream):
        super().__init__(stream)
        self._depth = 0
        self._nodes = 0

    def compose_node(self, parent, index):
        self._nodes += 1
        if self._nodes > MAX_NODES:  # early, before a large document is all composed
            raise _Refused(f"it holds more than {MAX_NODES} values; noisecal's files hold "
                           "a few thousand", self.peek_event().start_mark)
        if self.check_event(yaml.SequenceStartEvent, yaml.MappingStartEvent):
            self._depth += 1
            if self._depth > MAX_DEPTH:
                raise _Refused(f"nested more than {MAX_DEPTH} levels deep; noisecal's files "
                               "need a few levels", self.peek_event().start_mark)
            try:
                return super().compose_node(parent, index)
            finally:
                self._depth -= 1
        return super().compose_node(parent, index)

    def construct_document(self, node):
        _check_expansion(node)
        return super().construct_document(node)

    def construct_yaml_int(self, node):
        text = self.construct_scalar(node)
        if not isinstance(text, str):
            raise _Refused("an integer that is not text", node.start_mark)
        value = text.replace("_", "")
        sign = -1 if value.startswith("-") else 1
        value = value.lstrip("+-")
        base = 10
        if value[:2] in ("0x", "0X", "0o", "0O", "0b", "0B"):
            base = {"x": 16, "o": 8, "b": 2}[value[1].lower()]
            value = value[2:]
        if len(value) > MAX_INT_DIGITS:
            raise _Refused(f"an integer of {len(value)} digits; noisecal reads integers of "
                           f"up to {MAX_INT_DIGITS} digits", node.start_mark)
        try:
            return sign * int(value, base)
        except ValueError:
            raise _Refused(f"{text[:40]!r} is not an integer", node.start_mark) from None

    def construct_yaml_float(self, node):
        text = self.construct_scalar(node)
        value = str(text).replace("_", "").lower()
        sign = -1.0 if value.startswith("-") else 1.0
        value = value.lstrip("+-")
        if value in ("inf", ".inf", "nan", ".nan"):
            return sign * float(value.lstrip("."))
        try:
            return sign * float(value)
        except ValueError:
            raise _Refused(f"{str(text)[:40]!r} is not a number", node.start_mark) from None


GuardedLoader.add_implicit_resolver("tag:yaml.org,2002:bool", _BOOL, list("tTfF"))
GuardedLoader.add_implicit_resolver("tag:yaml.org,2002:int", _INT, list("-+0123456789"))
GuardedLoader.add_implicit_resolver("tag:yaml.org,2002:float", _FLOAT,
                                    list("-+.0123456789iInN"))
GuardedLoader.add_constructor("tag:yaml.org,2002:int", GuardedLoader.construct_yaml_int)
GuardedLoader.add_constructor("tag:yaml.org,2002:float", GuardedLoader.construct_yaml_float)


def quote_for_loader(dumper: type) -> type:
    """Make a SafeDumper subclass quote text :class:`GuardedLoader` would read as a number.

    A dumper quotes a string only when its own (YAML 1.1) resolvers would read it
    as something else, so ``"1e3"``, ``"inf"`` or ``"0o17"`` are written plain and
    read back by :class:`GuardedLoader` as numbers. Adding the loader's resolvers to
    the dumper's makes it quote text either reading would take for a number or a
    boolean, so what it writes reads back the same with ``yaml.safe_load`` and with
    :func:`read_yaml`.

    Parameters
    ----------
    dumper : type
        A ``yaml.SafeDumper`` subclass; changed in place and returned.
    """
    for first, resolvers in GuardedLoader.yaml_implicit_resolvers.items():
        for tag, regexp in resolvers:
            if tag in ("tag:yaml.org,2002:int", "tag:yaml.org,2002:float",
                       "tag:yaml.org,2002:bool"):
                dumper.add_implicit_resolver(tag, regexp, [first])
    return dumper


def _check_expansion(root) -> None:
    """Refuse a node graph whose full expansion passes MAX_NODES, or that loops."""
    sizes: dict = {}
    busy = object()
    stack = [(root, False)]
    while stack:
        node, done = stack.pop()
        key = id(node)
        if done:
            if isinstance(node, yaml.MappingNode):
                kids = [n for pair in node.value for n in pair]
            else:
                kids = node.value
            total = 1 + sum(sizes[id(k)] for k in kids)
            if total > MAX_NODES:
                raise _Refused(f"with its aliases expanded it holds more than {MAX_NODES} "
                               "values (an alias bomb?); write the values out or use fewer "
                               "aliases",
                               node.start_mark)
            sizes[key] = total
            continue
        if key in sizes:
            if sizes[key] is busy:
                raise _Refused("an alias refers to the collection it is in (a loop); "
                               "remove the recursive alias", node.start_mark)
            continue
        if isinstance(node, yaml.ScalarNode):
            sizes[key] = 1
            continue
        sizes[key] = busy
        stack.append((node, True))
        kids = ([n for pair in node.value for n in pair]
                if isinstance(node, yaml.MappingNode) else node.value)
        for kid in kids:
            if id(kid) in sizes and sizes[id(kid)] is busy:
                raise _Refused("an alias refers to the collection it is in (a loop); "
                               "remove the recursive alias", kid.start_mark)
            stack.append((kid, False))


def parse_yaml(text: str, where: str, what: str):
    """Parse YAML text with :class:`GuardedLoader`; errors name ``where`` and the line.

    Raises
    ------
    InputError
        Invalid YAML or a refused construct, one line with the line number.
    """
    try:
        return yaml.load(text, Loader=GuardedLoader)  # noqa: S506 -- a SafeLoader subclass
    except _Refused as exc:
        mark = exc.problem_mark
        line = f", line {mark.line + 1}" if mark is not None else ""
        raise InputError(f"{where}{line}: the {what} is refused: {exc.text}") from None
    except yaml.constructor.ConstructorError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = f", line {mark.line + 1}" if mark is not None else ""
        problem = " ".join(str(exc.problem or "").split())[:80]
        raise InputError(f"{where}{line}: the {what} holds something noisecal does not read "
                         f"({problem}); write plain mappings, lists, text and numbers") \
            from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = f", line {mark.line + 1}" if mark is not None else ""
        if "nesting depth" in str(getattr(exc, "problem", "")):  # libyaml's own limit
            raise InputError(f"{where}{line}: the {what} is refused: nested more than "
                             f"{MAX_DEPTH} levels deep; noisecal's files need a few levels") \
                from None
        raise InputError(f"{where}{line}: the {what} is not valid YAML; fix the syntax") \
            from None
    except (ValueError, TypeError, OverflowError, RecursionError, MemoryError):
        # e.g. a date such as 2024-13-45, or a tagged value that cannot be built
        raise InputError(f"{where}: the {what} holds a value that cannot be read "
                         "(a bad date or tagged value?); fix or quote it") from None


def read_yaml(path: Path, what: str):
    """The parsed document of a YAML side file, or a one-line InputError.

    Parameters
    ----------
    path : Path
        The file (a regular file of at most ``YAML_CAP`` bytes, UTF-8).
    what : str
        What it is, for messages (``"map file"``, ``"baseline"``, …).
    """
    data = read_side_file(path, what, YAML_CAP)
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: the {what} is not UTF-8 text (byte {exc.start}); "
                         "save it as UTF-8") from None
    return parse_yaml(text, str(path), what)
