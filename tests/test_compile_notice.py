"""The command line's note about first-use compilation, and ``emsource compile``.

A note appears only for compilations Numba announces (cache misses) of emsource kernels; the
listener is fed Numba's own event objects here, so no test has to compile a kernel cold.
"""

import io

from numba.core import event

from emsource import cli
from emsource.commands._compile_notice import CompileNotice, compile_notice


class _Dispatcher:
    def __init__(self, module):
        self.py_func = type("f", (), {"__module__": module})


def _events(module):
    data = {"dispatcher": _Dispatcher(module)}
    return (event.Event("numba:compile", event.EventStatus.START, data),
            event.Event("numba:compile", event.EventStatus.END, data))


def test_one_line_when_the_first_kernel_compiles_and_the_total_at_the_end():
    stream = io.StringIO()
    with compile_notice(stream) as listener:
        outer_start, outer_end = _events("emsource.kernels.sources")
        inner_start, inner_end = _events("emsource.kernels.electromagnetic")
        for e in (outer_start, inner_start, inner_end, outer_end):  # a nested compilation
            event.broadcast(e)
        for e in _events("emsource.kernels.conservation"):
            event.broadcast(e)
        for e in _events("someone_else"):  # not a kernel of the package: not counted
            event.broadcast(e)
    lines = stream.getvalue().splitlines()
    assert len(lines) == 2
    assert "compiling kernels for this machine" in lines[0]
    assert lines[1].startswith("emsource: compiled 2 kernel specialisations in ")
    assert listener.kernels == 2


def test_nothing_when_nothing_compiles():
    stream = io.StringIO()
    with compile_notice(stream):
        pass
    assert stream.getvalue() == ""
    assert CompileNotice(stream).summary().startswith("emsource: compiled 0 kernel")


def test_compile_command_calls_every_common_signature(capsys):
    assert cli.main(["compile"]) == 0
    out = capsys.readouterr().out.splitlines()
    names = [line.split("  ")[0] for line in out]
    for what in ("sources", "T_ab"):
        for dtype in ("float64", "float32"):
            for layout in ("contiguous", "strided"):
                assert f"{what}, {dtype}, {layout}" in names
    assert out[-1].startswith("total")


def test_silent_where_stderr_is_not_a_terminal(capsys):
    # Scripts and pipelines rely on a successful command writing nothing to stderr.
    with compile_notice() as listener:
        for e in _events("emsource.kernels.sources"):
            event.broadcast(e)
    assert listener is None and capsys.readouterr().err == ""
