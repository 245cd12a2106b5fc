"""Grammar fuzzing of the OpenQASM reader through the CLI and the API (hypothesis).

Programs are drawn from a small grammar of valid statements, then mutated: deep nesting, huge
numbers, huge expansions, wrong arities, unknown gates, stray Unicode, truncation. Whatever comes
in, the answer is a result or a clear error: exit code 0 or 2 with one ``veramp: error:`` line
(with ``file:line:column`` for text errors) from the CLI, and 2xx or 4xx with a JSON error body
from the API — never a traceback or a 500 (common practice for input handling; the limits are ours).
"""

import json

import pytest
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.app import create_app
from service.cli import main

from .test_service import make_settings

HEADERS = ['OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\n', 'OPENQASM 3.0;\ninclude "stdgates.inc";\nqubit[3] q;\n']

NUMBERS = st.sampled_from(["0.5", "pi/2", "1e400", "-1e308*10", "0x1F", "0b2", "1e-400", "nan", "1im", "3dt",
                           "(" * 300 + "1" + ")" * 300, "-" * 3000 + "1", "sqrt(-1)", "1/0", "2^2^2^2^2^2",
                           "θ", "1_000", "9" * 400])
GATES = st.sampled_from(["h", "x", "cx", "ccx", "rx", "u3", "cu3", "swap", "foo", "U", "gphase", "CX", "rzz",
                         "c4x", "q", "measure", "ctrl(20) @ x", "pow(1e308) @ h", "inv @ rx", "negctrl @ h",
                         "pow(nan) @ x", "ctrl(0) @ x"])
OPERANDS = st.sampled_from(["q[0]", "q[1]", "q[2]", "q[3]", "q[-1]", "q", "q[0:1]", "q[{0,2}]", "q[99999999999]",
                            "r[0]", "$0", "q[0], q[0]", "q[0], q[1]", "q[0], q[1], q[2]", "q[1.5]", "q[-4]"])


@st.composite
def statements(draw) -> str:
    kind = draw(st.integers(0, 9))
    if kind <= 4:
        params = draw(st.lists(NUMBERS, max_size=4))
        p = f"({', '.join(params)})" if params else ""
        return f"{draw(GATES)}{p} {draw(OPERANDS)};"
    if kind == 5:                           # nested definitions with a large fan-out
        depth, fan = draw(st.integers(1, 12)), draw(st.integers(1, 40))
        defs = "gate g0 a { h a; }\n" + "".join(f"gate g{k} a {{ {f'g{k - 1} a; ' * fan}}}\n"
                                                 for k in range(1, depth + 1))
        return defs + f"g{depth} q[0];"
    if kind == 6:
        return f"for int i in [0:{draw(st.sampled_from(['2', '10', '1e12', '-5', 'n']))}] {{ h q[i]; }}"
    if kind == 7:
        return draw(st.sampled_from(["barrier;", "delay[10ns] q;", "box { h q[0]; }", "let a = q[0] ++ q[1];",
                                     "while (true) { h q[0]; }", "reset q[0];", "if (c) x q[0];",
                                     "def f(qubit a) { h a; }", "const int k = 3;", "include \"x.inc\";",
                                     "gate g a { g a; }", "OPENQASM 2.0;", "}", "{", "@annot", "\u202e h q[0];"]))
    if kind == 8:
        return "".join(draw(st.lists(st.sampled_from(list("(){}[];,@=+-*/^\"'$#\u00e9\u03b8\ud7ff x0")),
                                     max_size=30)))
    return draw(st.text(max_size=40))


@st.composite
def programs(draw) -> str:
    text = draw(st.sampled_from(HEADERS)) + "\n".join(draw(st.lists(statements(), min_size=1, max_size=6)))
    if draw(st.booleans()) and len(text) > 10:     # truncate somewhere
        text = text[:draw(st.integers(1, len(text)))]
    return text


FUZZ = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                        HealthCheck.too_slow])


@FUZZ
@given(text=programs())
def test_cli_answers_every_program_with_a_result_or_one_error_line(text, tmp_path_factory, capsys):
    path = tmp_path_factory.mktemp("p") / "prog.qasm"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    code = main(["convert", str(path), "--to", "json"])
    out, err = capsys.readouterr()
    assert code in (0, 2), err
    if code == 0:
        assert json.loads(out)["format"] == "veramp.circuit"
    else:
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("veramp: error:"), err
        assert "Traceback" not in err


@pytest.fixture(scope="module")
def api(tmp_path_factory):
    with TestClient(create_app(make_settings(tmp_path_factory.mktemp("api"))), raise_server_exceptions=False) as c:
        yield c


@FUZZ
@given(text=programs())
def test_api_answers_every_program_with_2xx_or_4xx(text, api):
    r = api.post("/v1/circuits", json={"qasm": text.encode("utf-8", "replace").decode("utf-8")})
    assert r.status_code == 201 or 400 <= r.status_code < 500, (r.status_code, r.text[:300])
    if r.status_code != 201:
        body = r.json()
        assert body["message"] and "Traceback" not in body["message"]
    assert api.get("/v1/health").status_code == 200
