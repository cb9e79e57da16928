"""qualify / plan / report against a real SQLite store filled with the simulator's demo populations."""

import base64
import html
import json
import re

import pytest
from storefill import fill

from benchlog.views.cli import main

EVIL = '<script>alert("x")</script>'


@pytest.fixture(scope="module")
def db(tmp_path_factory):
    path = tmp_path_factory.mktemp("store") / "lab.sqlite"
    return fill(
        path,
        units_per_lot=8,
        recorded=300,
        seed=1,
        lots=(("AG-MS5", "L1"), ("VS-505", 'L<2>&"b"')),
        names={("VS-505", 0): EVIL},
    )


@pytest.fixture(scope="module")
def small_db(tmp_path_factory):
    path = tmp_path_factory.mktemp("small") / "small.sqlite"
    return fill(path, units_per_lot=3, recorded=50, test_end=20_000, seed=2)


def test_qualify_fails_the_demo_candidate_and_writes_json(db, tmp_path, capsys):
    out = tmp_path / "q.json"
    code = main(
        [
            "qualify",
            "--db",
            db,
            "--incumbent",
            "AG-MS5",
            "--candidate",
            "VS-505",
            "--json",
            "-o",
            str(out),
            "--resamples",
            "300",
        ]
    )
    text = capsys.readouterr().err  # with --json the table goes to standard error
    assert code == 1 and "verdict: FAIL (exit 1)" in text
    assert "operate time max (candidate)" in text and "B10 life (candidate)" in text
    doc = json.loads(out.read_text())
    assert doc["outcome"] == "fail" and doc["exit_code"] == 1
    assert {c["outcome"] for c in doc["criteria"]} <= {"pass", "fail", "not yet decidable"}
    assert doc["life"]["VS-505:" + 'L<2>&"b"']["units"] == 8


def test_qualify_with_too_few_units_is_exit_2(small_db, capsys):
    code = main(
        [
            "qualify",
            "--db",
            small_db,
            "--incumbent",
            "AG-MS5:L1",
            "--candidate",
            "VS-505:L1",
            "--resamples",
            "200",
        ]
    )
    text = capsys.readouterr().out
    assert code == 2 and "NOT YET DECIDABLE" in text
    assert "a population claim needs 5" in text


def test_lot_names(small_db, capsys):
    # "L1" is a lot code of both parts: refused with the choices; an unknown name lists what exists
    assert main(["qualify", "--db", small_db, "--incumbent", "L1", "--candidate", "VS-505"]) == 10
    err = capsys.readouterr().err
    assert "AG-MS5:L1" in err and "VS-505:L1" in err and len(err.strip().splitlines()) == 1
    assert main(["qualify", "--db", small_db, "--incumbent", "nope", "--candidate", "VS-505"]) == 10
    assert "no lot or part 'nope'" in capsys.readouterr().err


def test_bad_spec_and_options_are_one_line_errors(small_db, tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("[part\nnumber = 1\n")
    assert (
        main(
            [
                "qualify",
                "--db",
                small_db,
                "--incumbent",
                "AG-MS5",
                "--candidate",
                "VS-505",
                "--spec",
                str(bad),
            ]
        )
        == 8
    )
    err = capsys.readouterr().err
    assert "bad.toml" in err and "Traceback" not in err
    with pytest.raises(SystemExit) as exc:
        main(["qualify", "--db", small_db, "--incumbent", "a", "--candidate", "b", "--confidence", "2"])
    assert exc.value.code == 64  # a usage error is never mistaken for "not enough data" (2)
    assert (
        main(
            [
                "qualify",
                "--db",
                str(tmp_path / "missing" / "x.sqlite"),
                "--incumbent",
                "a",
                "--candidate",
                "b",
            ]
        )
        == 6
    )


def test_plan(small_db, capsys):
    assert main(["plan", "--confidence", "0.95", "--reliability", "0.9"]) == 0
    assert "success run: 29 units" in capsys.readouterr().out
    assert main(["plan", "--spec", "VS-505", "--shape", "2", "--units", "16"]) == 0
    text = capsys.readouterr().out
    assert "16 units: 116,872 cycles each" in text
    # the spec's limits on each unit (operate time on every actuation, chatter) need the success run's
    # 22 units at 90 % / 90 % (ln 0.1 / ln 0.9 = 21.9; common practice, benchlog/stats/_planning.py)
    assert "limits on each unit (operate time max, chatter rate): 22 units with none beyond" in text
    # a chatter comparison's bootstrap holds its level from 16 units a lot (bench_calibration.py
    # --only chatter, against the simulator's truth)
    assert "comparison with the incumbent (chatter rate, candidate - incumbent): 16 units in each lot" in text
    assert main(["plan", "--spec", "VS-505", "--shape", "2", "--lot", "VS-505:L1", "--db", small_db]) == 0
    text = capsys.readouterr().out
    assert "running test VS-505 (lot L1): 3 units" in text
    assert re.search(r"[\d,]+ more cycles on each of the \d running units", text)
    # without --spec or --life: the part's stored spec, as qualify uses it (the shipped VS-505 spec,
    # stored with the part by the fill), so the same plan as with --spec VS-505
    assert main(["plan", "--shape", "2", "--lot", "VS-505:L1", "--db", small_db]) == 0
    assert capsys.readouterr().out == text


def test_report_keeps_an_existing_file_unless_forced(small_db, tmp_path, capsys):
    out = tmp_path / "r.html"
    out.write_text("a report from last week")
    argv = ["report", "--db", small_db, "--incumbent", "AG-MS5", "--candidate", "VS-505", "-o", str(out)]
    argv += ["--resamples", "100"]
    assert main(argv) == 64
    err = capsys.readouterr().err
    assert "--force" in err and len(err.strip().splitlines()) == 1
    assert out.read_text() == "a report from last week"
    assert main([*argv, "--force"]) == 2  # too few units: not yet decidable, and the report written
    assert "<html" in out.read_text()


def test_report_is_self_contained_and_escaped(db, tmp_path, capsys):
    out = tmp_path / "r.html"
    code = main(
        [
            "report",
            "--db",
            db,
            "--incumbent",
            "AG-MS5:L1",
            "--candidate",
            "VS-505",
            "-o",
            str(out),
            "--resamples",
            "300",
        ]
    )
    assert code == 1
    page = out.read_text()
    assert EVIL not in page and "&lt;script&gt;" in page
    assert 'L<2>&"b"' not in page and "L&lt;2&gt;&amp;&quot;b&quot;" in page
    assert "http://" not in page and "https://" not in page  # nothing fetched from anywhere
    images = re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)
    assert len(images) >= 6
    assert all(base64.b64decode(i)[:8] == b"\x89PNG\r\n\x1a\n" for i in images)
    for part in (
        "Verdict",
        "Life",
        "Runs and incidents",
        "port vanished for 4 s",
        "Spec used",
        "max_ms = 3.0",
        "benchlog 0.",
    ):
        assert part in page


def test_operations_counted_per_cycle_or_per_actuation(small_db, tmp_path):
    from benchlog.views.report import evaluate

    per_cycle = evaluate(small_db, "AG-MS5:L1", "VS-505:L1", resamples=100, per="cycle")
    per_act = evaluate(small_db, "AG-MS5:L1", "VS-505:L1", resamples=100, per="actuation")
    a = per_cycle.qualification.life["VS-505:L1"]["rate_per_10k"]
    b = per_act.qualification.life["VS-505:L1"]["rate_per_10k"]
    assert b["operations"] == 2 * a["operations"]  # each make and each break is one operation
    # the part's own word for one operating cycle, from the spec's [conditions]
    assert (a["operation"], b["operation"]) == ("plunger stroke", "make or break")
    assert b["rate"] == pytest.approx(a["rate"] / 2)


def test_report_into_a_missing_folder_is_one_line(small_db, tmp_path, capsys):
    code = main(
        [
            "report",
            "--db",
            small_db,
            "--incumbent",
            "AG-MS5",
            "--candidate",
            "VS-505",
            "-o",
            str(tmp_path / "no" / "such" / "r.html"),
            "--resamples",
            "100",
        ]
    )
    err = capsys.readouterr().err
    assert code == 9 and "cannot write" in err and len(err.strip().splitlines()) == 1


def test_json_to_stdout_alone(small_db, capsys):
    code = main(
        [
            "qualify",
            "--db",
            small_db,
            "--incumbent",
            "AG-MS5",
            "--candidate",
            "VS-505",
            "--json",
            "--resamples",
            "100",
        ]
    )
    captured = capsys.readouterr()
    assert code == 2 and json.loads(captured.out)["outcome"] == "not yet decidable"
    assert "verdict: NOT YET DECIDABLE" in captured.err


def test_report_carries_the_quality_file_fields(db, tmp_path):
    from benchlog.views.report import data_checksum, evaluate

    out = tmp_path / "r.html"
    args = ["report", "--db", db, "--incumbent", "AG-MS5:L1", "--candidate", "VS-505", "-o", str(out)]
    args += ["--resamples", "300", "--number", "QR-7", "--revision", "C", "--ambient", f"23 C {EVIL}"]
    args += ["--prepared", "J. Okafor", "--prepared-on", "2026-12-02", "--approved", "R. Lind"]
    assert main(args) == 1
    page = out.read_text()
    text = re.sub(r"<[^>]+>", " ", page)
    text = " ".join(text.split())
    assert "report number QR-7" in text and "revision C" in text
    # conditions: given, from the spec's [conditions], from the runs, or said to be missing
    assert f"ambient temperature 23 C {html.escape(EVIL)} given for this report" in text
    assert "load switched 24 V DC, 10 mA resistive (door-interlock sense input) the spec" in text
    assert "coil voltage not recorded" in text
    assert "cycle profile drive on 50 ms, off 50 ms, to 300,000 cycles recorded with the runs" in text
    # the bench and the sampler it announced; the store, the runs and the data's checksum
    assert "bench-A BW-BENCH-A" in text and "1,000,000 Hz" in text
    assert f"store {db}" in text and "runs 1 " in text
    ev = evaluate(db, "AG-MS5:L1", "VS-505", resamples=100, with_runs=True)
    checksum = data_checksum([ev.incumbent, ev.candidate])
    assert re.fullmatch(r"[0-9a-f]{64}", checksum) and checksum in text
    # sign-off: names and dates given are filled, the rest left blank for ink
    assert "prepared J. Okafor 2026-12-02" in text and "reviewed approved R. Lind" in text
    # the running header is a CSS string: the lot code's quotes and brackets cannot break out of it
    assert page.count("</style>") == 2 and "<script" not in page
    header = re.search(r"@top-left \{ content: (\"[^\"]*\"); \}", page).group(1)
    assert "report QR-7, revision C" in header and '"' not in header[1:-1]


def test_report_states_a_profile_given_as_every_command_takes_it(small_db, tmp_path, capsys):
    # --profile is ON_MS:OFF_MS:CYCLES here too (docs/commands.md); the report states it in the words
    # it uses for a run's recorded profile; free text belongs in the spec's [conditions]
    out = tmp_path / "r.html"
    argv = ["report", "--db", small_db, "--incumbent", "AG-MS5", "--candidate", "VS-505", "-o", str(out)]
    argv += ["--resamples", "100"]
    assert main([*argv, "--profile", "40:60:20000"]) == 2
    text = " ".join(re.sub(r"<[^>]+>", " ", out.read_text()).split())
    assert "cycle profile drive on 40 ms, off 60 ms, to 20,000 cycles given for this report" in text
    with pytest.raises(SystemExit) as exc:
        main([*argv, "--force", "--profile", "50 ms pressed, 50 ms released"])
    assert exc.value.code == 64 and "ON_MS:OFF_MS:CYCLES" in capsys.readouterr().err


def test_report_wording(db, tmp_path):
    out = tmp_path / "r.html"
    doc = tmp_path / "q.json"
    common = ["--db", db, "--incumbent", "AG-MS5:L1", "--candidate", "VS-505", "--resamples", "300"]
    assert main(["report", *common, "-o", str(out)]) == 1
    assert main(["qualify", *common, "--json", "-o", str(doc)]) == 1
    text = " ".join(re.sub(r"<[^>]+>", " ", out.read_text()).split())
    failed = [c["name"] for c in json.loads(doc.read_text())["criteria"] if c["outcome"] == "fail"]
    assert failed and "Failed: " + "; ".join(failed) + "." in text  # the banner names them
    assert not re.search(r"[a-z]\(s\)", text) and "1 criteria" not in text and "1 failures" not in text
    assert "scipy's" not in text
    assert "per 10,000 plunger strokes" in text and "coil cycle" not in text  # the part's own word
    # one rounding rule: the metric table shows the verdict table's three significant figures
    p95 = re.search(r"make bounce p95 \(candidate\) ([\d.]+) \[", text).group(1)
    assert re.search(rf"VS-505:L\S* 8 [\d,]+ {re.escape(p95)} \[", text)


def test_report_as_pdf(small_db, tmp_path):
    common = ["--db", small_db, "--incumbent", "AG-MS5", "--candidate", "VS-505", "--resamples", "100"]
    by_name = tmp_path / "r.pdf"
    assert main(["report", *common, "-o", str(by_name)]) == 2
    by_option = tmp_path / "r.out"
    assert main(["report", *common, "--pdf", "--paper", "letter", "-o", str(by_option)]) == 2
    for f in (by_name, by_option):
        assert f.read_bytes()[:5] == b"%PDF-"
    with pytest.raises(SystemExit) as exc:
        main(["report", *common, "--prepared-on", "2 Dec"])
    assert exc.value.code == 64


def test_data_checksum_follows_the_data(tmp_path):
    from benchlog.views.report import data_checksum, evaluate

    sums = []
    for name, seed in (("a", 4), ("b", 4), ("c", 5)):
        path = fill(tmp_path / f"{name}.sqlite", units_per_lot=3, recorded=40, test_end=20_000, seed=seed)
        ev = evaluate(path, "AG-MS5:L1", "VS-505:L1", resamples=100, min_units=3)
        sums.append(data_checksum([ev.incumbent, ev.candidate]))
    assert sums[0] == sums[1]  # the same data in another file
    assert sums[0] != sums[2]  # other data


def test_report_shows_analog_captures_measured_by_the_voltage_definitions(small_db, tmp_path):
    import numpy as np

    from benchlog.analog import render_contact

    # a make at 1 ms whose contact reopens twice: closed at 1.0, 1.3 and 1.7 ms, open again at 1.2 and
    # 1.5 ms (the truth the capture is rendered from), sampled at 1 MS/s
    edges = np.array([1.0e6, 1.2e6, 1.3e6, 1.5e6, 1.7e6])
    v = render_contact(edges, np.array([1, 0, 1, 0, 1]), 0, start_ns=0.0, dt_ns=1000.0, n=8000)
    folder = tmp_path / "captures"
    folder.mkdir()
    np.savez(folder / "make.npz", dt=np.float64(1e-6), contact=v)
    out = tmp_path / "r.html"
    argv = ["report", "--db", small_db, "--incumbent", "AG-MS5", "--candidate", "VS-505", "-o", str(out)]
    assert main([*argv, "--captures", str(folder)]) in (0, 1, 2)
    text = out.read_text()
    assert "<h2>Analog captures</h2>" in text and '<img alt="capture make.npz"' in text
    row = re.search(r"<td>make</td><td[^>]*>([\d.]+)</td><td[^>]*>([\d.]+)</td><td[^>]*>(\d+)</td>", text)
    assert row is not None
    # bounce from the first touch to the last closure: 700 us, within a sample interval (1 us) of the
    # rendered truth; two reopenings
    assert abs(float(row.group(2)) - 700.0) <= 1.0 and row.group(3) == "2"
    (tmp_path / "empty").mkdir()
    assert main([*argv, "--force", "--captures", str(tmp_path / "empty")]) == 10
