"""The layout description inside a returned workbook is untrusted input.

Every altered description of ``tests/description_corpus.py`` is run through every command that reads
a workbook, each in a child process whose peak memory is measured and whose wall time is bounded:
it must end cleanly (one line, a documented exit code, never an internal error) under 500 MB and
30 s, and audit must report it as a finding of its own kind."""

from __future__ import annotations

import contextlib
import json
import random
import subprocess
import sys
from pathlib import Path

import pytest

from sheetnet.checks.audit import audit
from sheetnet.checks.extract import extract
from sheetnet.checks.verify import verify
from sheetnet.errors import SheetNetError
from tests.conftest import write_csv
from tests.description_corpus import CASES
from tests.tamper import alter_description, read_description

#: Cases whose altered part verify does not need: it verifies, and says the description has problems.
NOT_NEEDED_TO_VERIFY = {"negative block position", "block past the sheet's end", "original learning rate NaN",
                        "original weight infinite", "names disagree with the layout", "stored data rows missing",
                        "fingerprints a list"}
MEMORY_LIMIT_MB = 500
TIME_LIMIT_S = 30

_MEASURE = """
import json, resource, subprocess, sys
commands, limit = json.loads(sys.argv[1]), float(sys.argv[2])
children = [subprocess.Popen([sys.executable, "-m", "sheetnet", *command], stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True) for command in commands]
results = []
for child in children:
    out, err = child.communicate(timeout=limit)
    results.append({"code": child.returncode, "out": out, "err": err})
print(json.dumps({"results": results, "peak_mb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024}))
"""


def run_measured(commands: list[list[str]]) -> tuple[list[dict], float]:
    """Run sheetnet commands side by side in child processes (they read the same file and write
    different ones): their results and the largest peak resident memory among them (MB)."""
    done = subprocess.run([sys.executable, "-c", _MEASURE, json.dumps(commands), str(TIME_LIMIT_S)],
                          capture_output=True, text=True, timeout=TIME_LIMIT_S * len(commands) + 30)
    assert done.returncode == 0, done.stderr[-2000:]
    report = json.loads(done.stdout)
    return report["results"], report["peak_mb"]


@pytest.fixture(scope="module")
def book(tmp_path_factory) -> Path:
    """A demo-size workbook: 120 cases, 4 inputs, a record of 6 epochs."""
    from sheetnet.cli import main
    from sheetnet.demo import DEMO_FLAGS, demo_csv_text

    folder = tmp_path_factory.mktemp("untrusted")
    data = folder / "data.csv"
    data.write_text(demo_csv_text())
    assert main(["build", str(data), *DEMO_FLAGS, "--quiet", "-o", str(folder / "book.xlsx")]) == 0
    return folder / "book.xlsx"


def _one_error_line(result: dict) -> str:
    lines = result["err"].strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("sheetnet: error:"), result
    assert "internal error" not in lines[0] and "Traceback" not in result["err"], result
    return lines[0]


@pytest.mark.parametrize("case", sorted(CASES))
def test_altered_description_ends_cleanly_on_every_command(case, book, tmp_path):
    altered = alter_description(book, tmp_path / "altered.xlsx", CASES[case])
    model, page, report = tmp_path / "model.json", tmp_path / "report.html", tmp_path / "audit.json"
    marked = tmp_path / "marked.xlsx"
    commands = [["verify", str(altered), "--quiet"],
                ["audit", str(altered), "--quiet", "--json", str(report), "--annotate", str(marked)],
                ["extract", str(altered), "-o", str(model)], ["report", str(altered), "-o", str(page)]]
    (verified, audited, extracted, reported), peak = run_measured(commands)
    assert peak < MEMORY_LIMIT_MB, f"{case}: peak {peak:.0f} MB"

    findings = json.loads(report.read_text())
    assert audited["code"] == 3 and findings["counts"]["description"] >= 1 and marked.exists(), audited
    assert "Layout description" in audited["out"]
    if case in NOT_NEEDED_TO_VERIFY:
        assert verified["code"] == 0 and "note: the layout description has" in verified["out"], verified
        assert extracted["code"] == 0 and model.exists(), extracted
    else:
        assert verified["code"] == 2 and "cannot verify" in _one_error_line(verified), verified
        assert extracted["code"] == 1 and not model.exists(), extracted
        _one_error_line(extracted)
        assert reported["code"] == 1 and not page.exists()
        _one_error_line(reported)


def test_problems_name_what_disagrees_with_what(book, tmp_path):
    def more_units(data):
        data["spec"]["units"][0] = 10_000_000
        return data

    report = audit(alter_description(book, tmp_path / "a.xlsx", more_units))
    assert [f.cell for f in report.of("description")] == ["spec.units[0]"]
    assert "10,000,000 is outside 1..16,382" in report.of("description")[0].note

    def moved(data):
        data["names"]["W_1"]["top"] = -5
        return data

    report = audit(alter_description(book, tmp_path / "b.xlsx", moved))
    note = report.of("description")[0].note
    assert report.of("description")[0].cell == "names.W_1" and "Parameters!B16" in note


def test_a_description_claiming_more_rows_than_the_sheet_holds_is_refused(book, tmp_path):
    """A consistent description (spec, sets and stored inputs all grown together) that asks for more
    cases than the Scoring sheet holds: the sheet, not the description, bounds the work."""

    def grown(data):
        extra = 5_000
        data["spec"]["n_cases"] += extra
        data["spec"]["sets"] += ["holdout"] * extra
        data["inputs"]["data"] += [data["inputs"]["data"][0]] * extra
        return data

    with pytest.raises(SheetNetError, match="sheet 'Scoring': the description needs"):
        verify(alter_description(book, tmp_path / "a.xlsx", grown))


def _random_mutation(rng: random.Random):
    """Replace, delete or grow one random node of the description."""
    junk = [None, -1, 0, 2**70, 1e308, float("nan"), float("-inf"), "", "x" * 300, [], {}, [[[]]], True,
            {"sheet": "Parameters", "top": -1}, list(range(50))]

    def mutate(data):
        node, parent, key = data, None, None
        for _ in range(rng.randint(1, 6)):
            if isinstance(node, dict) and node:
                key = rng.choice(sorted(node))
            elif isinstance(node, list) and node:
                key = rng.randrange(len(node))
            else:
                break
            parent, node = node, node[key]
        if parent is None:
            return data
        if rng.random() < 0.2 and isinstance(parent, dict):
            del parent[key]
        else:
            parent[key] = rng.choice(junk)
        return data

    return mutate


@pytest.mark.parametrize("seed", range(40))
def test_random_alterations_never_escape_as_internal_errors(seed, book, tmp_path):
    altered = alter_description(book, tmp_path / "r.xlsx", _random_mutation(random.Random(seed)))
    for run in (lambda: verify(altered), lambda: audit(altered), lambda: extract(altered)):
        with contextlib.suppress(SheetNetError):
            run()


# ---------------------------------------------------------------- signatures


@pytest.fixture(scope="module")
def signed(tmp_path_factory, book) -> dict[str, Path]:
    from sheetnet.cli import main

    folder = tmp_path_factory.mktemp("signed")
    key, other = folder / "team.key", folder / "other.key"
    assert main(["new-key", str(key)]) == 0 and main(["new-key", str(other)]) == 0
    data = write_csv(folder / "d.csv", ["a", "b", "label"],
                     [[0.1 * i, (i * 7 % 5) / 5, "yes" if i % 3 else "no"] for i in range(16)])
    assert main(["build", str(data), "--target", "label", "--epochs", "2", "--quiet", "--sign-key", str(key),
                 "-o", str(folder / "signed.xlsx")]) == 0
    return {"book": folder / "signed.xlsx", "key": key, "other": other, "folder": folder}


def test_new_key_is_private_random_and_never_overwritten(signed, run_cli):
    key = signed["key"]
    assert key.stat().st_mode & 0o777 == 0o600
    assert len(bytes.fromhex(key.read_text().strip())) == 32
    assert key.read_text() != signed["other"].read_text()
    code, _, err = run_cli("new-key", key)
    assert code == 2 and "exists" in err


def test_short_or_shared_key_files(signed, tmp_path, run_cli):
    short = tmp_path / "short.key"
    short.write_text("abcd\n")
    code, _, err = run_cli("verify", signed["book"], "--key", short)
    assert code == 2 and "at least 32 random bytes" in err
    for name, content in (("zeros.key", b"\0" * 64), ("huge.key", bytes(range(256)) * 40)):
        (tmp_path / name).write_bytes(content)
        code, _, err = run_cli("verify", signed["book"], "--key", tmp_path / name)
        assert code == 2 and "sheetnet new-key" in err, err
    shared = tmp_path / "shared.key"
    shared.write_text(signed["key"].read_text())
    shared.chmod(0o644)
    code, _, err = run_cli("verify", signed["book"], "--key", shared)
    assert code == 0 and "can be read by other users" in err


def test_signed_workbook_verifies_with_its_key(signed, run_cli):
    code, out, _ = run_cli("verify", signed["book"], "--key", signed["key"])
    assert code == 0 and "signature: VALID" in out
    code, out, _ = run_cli("audit", signed["book"], "--key", signed["key"])
    assert code == 0 and "signature valid" in out and "self-asserted" not in out


def test_wrong_key_and_missing_signature_do_not_hold(signed, book, run_cli):
    code, out, _ = run_cli("verify", signed["book"], "--key", signed["other"])
    assert code == 1 and "signature: WRONG-KEY" in out
    code, out, _ = run_cli("verify", book, "--key", signed["key"])
    assert code == 1 and "signature: MISSING" in out
    code, out, _ = run_cli("audit", book)
    assert "self-asserted" in out and "--against ORIGINAL" in out


def test_description_altered_after_signing_breaks_the_signature(signed, tmp_path, run_cli):
    def quieter(data):
        data["inputs"]["learning_rate"] = 0.7  # hides nothing yet: the file's rate is unchanged
        return data

    altered = alter_description(signed["book"], tmp_path / "a.xlsx", quieter)
    code, out, _ = run_cli("verify", altered, "--key", signed["key"])
    assert code == 1 and "signature: BROKEN" in out and "description was changed after signing" in out
    code, out, _ = run_cli("audit", altered, "--key", signed["key"], "--json", tmp_path / "f.json")
    report = json.loads((tmp_path / "f.json").read_text())
    assert code == 3 and report["counts"]["signature"] == 1 and "signature broken" in report["signature"][0]["note"]

    def untrusted(data):
        data["spec"]["units"][0] = 10_000_000
        return data

    code, _, err = run_cli("verify", alter_description(signed["book"], tmp_path / "b.xlsx", untrusted),
                           "--key", signed["key"])
    assert code == 2 and "signature broken" in err and len(err.strip().splitlines()) == 1


def test_signature_survives_a_round_trip_of_its_own_text(signed):
    """Re-serialising the stored description (as the check does) gives the signed text exactly."""
    from sheetnet.book.signing import canonical_json, mac, read_key

    data = read_description(signed["book"])
    assert mac(data, read_key(signed["key"])) == data["signature"]["mac"]
    assert json.loads(canonical_json(data)) == {k: v for k, v in data.items() if k != "signature"}


# ---------------------------------------------------------------- what the description says of itself


@pytest.mark.parametrize("name, mutate, where", [
    ("fingerprint", lambda d: d["fingerprints"]["formulas"].__setitem__("Scoring", "0" * 64),
     "fingerprints.formulas.Scoring"),
    ("momentum when off", lambda d: d["inputs"].__setitem__("momentum", 0.5), "inputs.momentum"),
    ("L2 when off", lambda d: d["inputs"].__setitem__("l2", 0.5), "inputs.l2"),
    ("calculator", lambda d: d["inputs"]["calculator"].__setitem__(0, 1.5), "inputs.calculator"),
    ("provenance", lambda d: d["spec"]["provenance"][1].__setitem__(1, "another.csv"), "Guide"),
    ("scaling method", lambda d: d["spec"].__setitem__("scaling_method", "minmax"), "Guide"),
], ids=lambda v: v if isinstance(v, str) else "")
def test_alterations_of_parts_no_check_uses_are_found(name, mutate, where, book, tmp_path, run_cli):
    def change(data):
        mutate(data)
        return data

    altered = alter_description(book, tmp_path / "a.xlsx", change)
    report = audit(altered)
    found = [(f.kind, f.sheet or f.cell) for f in report.findings]
    if where == "Guide":
        assert ("structural", "Guide") in found and report.total == 1, found
    else:
        assert [f.cell for f in report.of("description")] == [where] and report.total == 1, found


def test_stored_inputs_the_trainer_cannot_replay_are_a_finding(tmp_path, run_cli, capsys):
    rows = [[0.1 * i, (i * 7 % 5) / 5, 3.0 * i - 1.0] for i in range(12)]
    data = write_csv(tmp_path / "r.csv", ["a", "b", "y"], rows)
    assert run_cli("build", data, "--target", "y", "--hidden", "none", "--epochs", "2", "--quiet",
                   "-o", tmp_path / "r.xlsx")[0] == 0
    capsys.readouterr()

    def explosive(data):
        data["inputs"]["learning_rate"] = 1e300  # a linear regression diverges at once
        return data

    report = audit(alter_description(tmp_path / "r.xlsx", tmp_path / "a.xlsx", explosive))
    notes = [f.note for f in report.of("description")]
    assert any("cannot replay the stored original inputs" in n for n in notes)
    assert report.of("input_edits")[0].cell == "B3"  # the file's learning rate is not the stored one
    assert capsys.readouterr().err == ""  # no numpy warnings


@pytest.mark.parametrize("damage, words", [
    ("deleted", "was deleted"),
    ("renamed", "was renamed to 'notes'"),
    ("bloated", "the layout sheet holds"),
    ("huge", "the layout sheet is"),
])
def test_a_missing_or_damaged_layout_sheet_is_a_finding(damage, words, book, tmp_path, run_cli):
    import zipfile

    out = tmp_path / "damaged.xlsx"
    with zipfile.ZipFile(book) as src, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for item in src.infolist():
            data = src.read(item.filename)
            if item.filename == "xl/workbook.xml" and damage in ("deleted", "renamed"):
                new = b'name="notes"' if damage == "renamed" else b'name="gone"'
                data = data.replace(b'name="sheetnet_layout"', new)
            if item.filename == "xl/worksheets/sheet8.xml" and damage == "deleted":
                data = data.replace(b"sheetnet layout description", b"nothing here")
            if item.filename == "xl/worksheets/sheet8.xml" and damage == "bloated":
                rows = "".join(f'<row r="{r}"><c r="A{r}"/></row>' for r in range(100, 20_000))
                data = data.replace(b"</sheetData>", rows.encode() + b"</sheetData>")
            if item.filename == "xl/worksheets/sheet8.xml" and damage == "huge":
                data = data.replace(b"</sheetData>", b"<!-- " + bytes(random.Random(3).choices(range(97, 123),
                                                                                            k=8_000_000)) + b" -->"
                                    + b"</sheetData>")
            dst.writestr(item, data)
    code, out_text, err = run_cli("audit", out)
    assert code == 3 and words in out_text, out_text + err
    code, _out, err = run_cli("verify", out)
    assert code == 2 and words in err and len(err.strip().splitlines()) == 1


def test_a_description_longer_than_the_workbook_could_need_is_refused(book, tmp_path):
    def padded(data):
        data["spec"]["provenance"] = [["note", "".join(random.Random(4).choices("abcdef", k=90_000))]] * 40
        return data

    report = audit(alter_description(book, tmp_path / "a.xlsx", padded))
    assert report.total == 1 and "the workbook's sheets hold enough for at most" in report.of("description")[0].note


@pytest.mark.slow
@pytest.mark.libreoffice_bridge
def test_signature_survives_saving_elsewhere_and_breaks_on_an_edit(signed, tmp_path, run_cli):
    """Saved again untouched by LibreOffice (15 digits, its own rounding) or openpyxl (16 digits), a
    signed workbook still verifies; a weight typed in LibreOffice breaks the signature, naming the sheet."""
    import openpyxl

    from tests.lo_edit import edit_in_libreoffice

    resaved = edit_in_libreoffice(signed["book"], tmp_path / "lo.xlsx", [])
    code, out, _ = run_cli("verify", resaved, "--key", signed["key"])
    assert code == 0 and "signature: VALID" in out, out
    book = openpyxl.load_workbook(signed["book"])
    book.save(tmp_path / "op.xlsx")
    code, out, _ = run_cli("verify", tmp_path / "op.xlsx", "--key", signed["key"])
    assert code == 0 and "signature: VALID" in out, out
    edited = edit_in_libreoffice(signed["book"], tmp_path / "edited.xlsx",
                                 [{"op": "value", "sheet": "Parameters", "cell": "B12", "value": 0.375}])
    code, out, _ = run_cli("verify", edited, "--key", signed["key"])
    assert code == 1 and "signature: BROKEN" in out and "on sheet(s) Parameters" in out, out


def _with_layout_xml(book: Path, out: Path, change) -> Path:
    """A copy whose layout sheet's XML is changed by ``change(text) -> text``."""
    import zipfile

    with zipfile.ZipFile(book) as src, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for item in src.infolist():
            data = src.read(item.filename)
            if item.filename == "xl/worksheets/sheet8.xml":
                data = change(data.decode()).encode()
            dst.writestr(item, data)
    return out


@pytest.mark.parametrize("change, words", [
    (lambda x: x.replace("</sheetData>", '<row r="90"><c r="B90"><v>12345</v></c></row></sheetData>'),
     "cell(s) besides the description"),
    (lambda x: x.replace("do not edit", "edit freely"), "title was changed"),
    (lambda x: x.replace("</sheetData>", "</sheetDat>"), "cannot be read"),
], ids=["extra cell", "title", "not well-formed"])
def test_the_layout_sheet_holds_only_the_description(change, words, book, tmp_path, run_cli):
    altered = _with_layout_xml(book, tmp_path / "a.xlsx", change)
    code, out, err = run_cli("audit", altered, "--annotate", tmp_path / "marked.xlsx")
    assert code == 3 and words in out, out + err
    assert (tmp_path / "marked.xlsx").exists()


def test_signature_breaks_on_an_added_sheet_or_layout_cell(signed, tmp_path, run_cli):
    import openpyxl

    book = openpyxl.load_workbook(signed["book"])
    book.create_sheet("Notes")["A1"] = "a reviewer's note"
    book.save(tmp_path / "added.xlsx")
    code, out, _ = run_cli("verify", tmp_path / "added.xlsx", "--key", signed["key"])
    assert code == 1 and "sheet(s) added after signing: Notes" in out
    book = openpyxl.load_workbook(signed["book"])
    book["sheetnet_layout"]["B5"] = 1
    book.save(tmp_path / "cell.xlsx")
    code, out, _ = run_cli("verify", tmp_path / "cell.xlsx", "--key", signed["key"])
    assert code == 1 and "the layout sheet holds more than the signed description" in out


def test_digests_without_a_signature_and_a_foreign_tool_are_found(signed, tmp_path):
    def unsigned(data):
        data.pop("signature")
        return data

    report = audit(alter_description(signed["book"], tmp_path / "a.xlsx", unsigned))
    assert [f.cell for f in report.of("description")] == ["fingerprints"]

    def tool(data):
        data["tool"] = "some other program"
        return data

    report = audit(alter_description(signed["book"], tmp_path / "b.xlsx", tool))
    assert [f.cell for f in report.of("description")] == ["tool"]


def test_extract_refuses_a_description_its_formulas_do_not_follow(book, tmp_path, run_cli):
    def tanh(data):
        data["spec"]["activations"][0] = {"name": "tanh"}
        return data

    code, _out, err = run_cli("extract", alter_description(book, tmp_path / "a.xlsx", tanh), "-o", tmp_path / "m.json")
    assert code == 1 and "Calculator's formulas do not compute what the layout description says" in err
    assert not (tmp_path / "m.json").exists()


def test_a_model_written_without_data_checks_cleanly(tmp_path, run_cli):
    model = {"format": "sheetnet-model", "version": 1, "inputs": ["u", "v"], "outputs": ["a", "b", "c"],
             "task": "multiclass", "loss": "cross-entropy", "classes": ["a", "b", "c"],
             "layers": [{"weights": [[0.5, -1.0], [0.25, 0.75]], "bias": [0.1, -0.1], "activation": "tanh"},
                        {"weights": [[1.0, 0.0], [0.0, 1.0], [0.5, 0.5]], "bias": [0, 0, 0], "activation": "softmax"}]}
    (tmp_path / "m.json").write_text(json.dumps(model))
    assert run_cli("build", "--model", tmp_path / "m.json", "-o", tmp_path / "b.xlsx")[0] == 0
    assert run_cli("verify", tmp_path / "b.xlsx")[0] == 0
    assert run_cli("audit", tmp_path / "b.xlsx")[0] == 0
    assert run_cli("extract", tmp_path / "b.xlsx", "-o", tmp_path / "back.json")[0] == 0
    assert run_cli("report", tmp_path / "b.xlsx", "-o", tmp_path / "r.html")[0] == 0
    back = json.loads((tmp_path / "back.json").read_text())
    assert [layer["weights"] for layer in back["layers"]] == [layer["weights"] for layer in model["layers"]]
