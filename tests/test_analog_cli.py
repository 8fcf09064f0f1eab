"""`gapforge analog`: JSON keys, design-file reading, text caution, exit codes."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import REPO, run_cli, run_subprocess

# a Schmitt part's own thresholds (the defaults are a wide generic band)
NET = ["--r", "4.7k", "--c", "100p", "--vt-plus", "50%:60%:70%", "--vt-minus", "30%:40%:50%"]


def test_json_has_the_issue_keys() -> None:
    code, out, _ = run_cli(["analog", *NET, "--simulate", "--json"])
    assert code == 0
    data = json.loads(out)
    for edge in ("rising", "falling"):
        assert data["edges"][edge]["delay_s"] > 0
        assert data["edges"][edge]["delay_sim_s"] > 0
    for key in ("to_high", "to_low"):
        r = data[key]
        assert 0 < r["min_s"] <= r["typ_s"] <= r["max_s"]
    # the slow edge's simulation agrees with the closed form within a few percent here
    rising = data["edges"]["rising"]
    assert rising["delay_sim_s"] == pytest.approx(rising["delay_s"], rel=0.03)
    assert data["parameters"]["rout"]["default"] is True
    assert data["parameters"]["r"]["default"] is False
    assert "bench" in data["caution"]


def test_without_simulate_there_is_no_simulated_delay() -> None:
    code, out, _ = run_cli(["analog", *NET, "--json"])
    assert code == 0
    assert "delay_sim_s" not in json.loads(out)["edges"]["rising"]


def test_text_output_carries_the_caution_and_shows_defaults() -> None:
    code, out, _ = run_cli(["analog", *NET, "--monte-carlo", "2000", "--min-dead", "100n"])
    assert code == 0
    assert out.count("reduced voltage with current limiting") == 1  # once, at the end
    assert out.rstrip().endswith("licensed engineering practice prevail.")
    assert "* rout" in out and "Monte Carlo (2000 samples" in out


def test_the_first_line_is_the_answer() -> None:
    # issue 10: the worst-case dead times and whether the network can overlap, first
    code, out, _ = run_cli(["analog", *NET, "--json"])
    data = json.loads(out)
    _, text, _ = run_cli(["analog", *NET])
    first = text.splitlines()[0]
    assert first.startswith("analog: ok - worst-case dead time to_high ")
    assert "cannot overlap" in first and data["can_overlap"] is False
    code, text, _ = run_cli(["analog", *NET, "--bypass", "rising"])
    assert code == 1 and "the network CAN OVERLAP" in text.splitlines()[0]


def test_monte_carlo_progress_is_reported_per_chunk_and_never_in_piped_output() -> None:
    # issue 10: a progress bar on a terminal only (click's, on stderr); the run reports each
    # chunk; under the test runner (not a TTY) nothing but the report is printed
    from gapforge.analog.parameters import network_from_options
    from gapforge.cli.analog_cmd import analyse

    seen: list[tuple[int, int]] = []
    net = network_from_options({"r": "4.7k", "c": "100p", "bypass": "none"})
    analyse(net, samples=600_000, progress=lambda done, total: seen.append((done, total)))
    assert seen == [(1, 3), (2, 3), (3, 3)]
    code, out, err = run_cli(["analog", *NET, "--monte-carlo", "1000", "--json"])
    assert code == 0 and err == "" and json.loads(out)["monte_carlo"]["samples"] == 1000


def test_a_monte_carlo_sample_beyond_the_worst_case_is_a_violated_limit(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # The worst case every build uses is corners checked on a finer grid; the Monte Carlo that
    # `analog --monte-carlo` draws holds it to account: a sample beyond it means the search
    # missed an extreme, so the answer is not ok (JCGM 101:2008 draws, ECSS-Q-HB-30-01A
    # extreme-value analysis). Simulate a worst case that came out too narrow.
    import dataclasses

    import gapforge.analog.tolerance as tol

    real = tol.worst_case

    def narrow(net, *args, **kw):  # type: ignore[no-untyped-def]
        wc = real(net, *args, **kw)
        lo, typ, hi = wc.floats["to_low"]
        floats = {**wc.floats, "to_low": (lo, typ, typ + 0.1 * (hi - typ))}
        return dataclasses.replace(wc, floats=floats)

    code, out, _ = run_cli(["analog", *NET, "--monte-carlo", "2000", "--json"])
    assert code == 0
    assert not any(r["beyond_worst_case"] for r in json.loads(out)["monte_carlo"]["results"].values())
    monkeypatch.setattr(tol, "worst_case", narrow)
    code, out, _ = run_cli(["analog", *NET, "--monte-carlo", "2000", "--json"])
    data = json.loads(out)
    assert code == 1 and data["limit_violated"] is True
    assert data["monte_carlo"]["results"]["to_low"]["beyond_worst_case"] is True
    assert data["monte_carlo"]["results"]["to_high"]["beyond_worst_case"] is False
    assert any("to_low: the Monte Carlo reached" in w and "not proven" in w
               for w in data["warnings"])
    code, out, _ = run_cli(["analog", *NET, "--monte-carlo", "2000"])
    assert code == 1 and "[beyond the worst case, see warnings]" in out


HOT = ["--r", "47k", "--c", "100p", "--diode", "IS=1e-6 N=1.05 RS=1 CJO=20p VJ=0.4 M=0.5 EG=0.69 XTI=2"]


def test_hot_schottky_warns_loudly_and_exits_1() -> None:
    # the dead time vanishes on a hot board: a limit violated, not a note
    code, out, _ = run_cli(["analog", *HOT, "--simulate", "--json"])
    data = json.loads(out)
    assert data["simulation"]["leakage_warning"] is True
    assert data["leakage"]["warning"] is True
    assert any("DIODE LEAKAGE AT 125 C" in w for w in data["warnings"])
    assert data["limit_violated"] is True
    assert code == 1


def test_leakage_is_checked_without_simulate_and_respects_leakage_warn() -> None:
    code, out, _ = run_cli(["analog", *HOT])
    assert code == 1
    assert "DIODE LEAKAGE AT 125 C TAKES 95 %" in out
    assert "simulated" not in out  # the model did it, no transient was run
    code, out, _ = run_cli(["analog", *HOT, "--leakage-warn", "99%"])
    assert code == 0 and "DIODE LEAKAGE" not in out


def test_help_documents_exit_1_for_leakage() -> None:
    code, out, _ = run_cli(["analog", "--help"])
    assert code == 0
    flat = " ".join(out.split())
    assert "Exit 1" in flat and "hot board" in flat and "--leakage-warn" in flat


def test_analog_warns_in_the_words_build_repeats() -> None:
    from gapforge.analog.findings import reference_findings
    from gapforge.analog.parameters import network_from_options

    for args, raw in ((HOT, {"r": "47k", "c": "100p", "diode": HOT[-1]}),
                      ([*NET, "--bypass", "rising"], {"r": "4.7k", "c": "100p", "bypass": "rising",
                                                       "vt_plus": NET[5], "vt_minus": NET[7]})):
        _, out, _ = run_cli(["analog", *args, "--json"])
        warnings = json.loads(out)["warnings"]
        findings = reference_findings(network_from_options(raw))
        assert findings and all(f in warnings for f in findings)


def test_caution_is_the_shared_text() -> None:
    from gapforge.base import caution

    _, out, _ = run_cli(["analog", *NET, "--json"])
    assert json.loads(out)["caution"] == caution.TEXT
    _, text, _ = run_cli(["analog", *NET])
    assert text.count(caution.TEXT) == 1


README_SUGGEST = ["--vdd", "3.3", "--r", "4.7k", "--c", "100p", "--bypass", "falling",
                  "--vt-plus", "2.0", "--vt-minus", "1.0", "--suggest", "300ns"]


def test_readme_suggest_example_offers_only_safe_pairs() -> None:
    code, out, _ = run_cli(["analog", *README_SUGGEST, "--json"])
    assert code == 0
    sg = json.loads(out)["suggestions"]
    assert sg["rank"] == "worst-case" and len(sg["pairs"]) == 6
    for pair in sg["pairs"]:
        assert pair["safe"] is True
        assert pair["to_high"]["min_s"] > 0 and pair["to_low"]["min_s"] > 0
    offered = {(p["r_ohm"], p["c_f"]) for p in sg["pairs"]}
    assert (121.0, 3.9e-9) not in offered
    bad = next(p for p in sg["rejected"] if (p["r_ohm"], p["c_f"]) == (121.0, 3.9e-9))
    assert bad["safe"] is False and bad["to_high"]["min_s"] == pytest.approx(-88.051e-9)  # E12 C at 10 %
    # the text shows each pair's worst case and names the rejected pair as unsafe
    code, text, _ = run_cli(["analog", *README_SUGGEST, "--suggest-rank", "typical"])
    assert code == 0
    assert "ranked by the typical error" in text and "worst case to_high" in text
    unsafe = text[text.index("not proposed, UNSAFE"):]
    assert "R    121 ohm  C   3.9 nF" in unsafe and "-88.06 ns is not positive" in unsafe


def test_suggest_with_min_dead_and_no_safe_pair_exits_1() -> None:
    # the network itself (worst case 410.8 ns) meets --min-dead; the suggestions are filtered
    code, out, _ = run_cli(["analog", *README_SUGGEST, "--min-dead", "240n", "--json"])
    data = json.loads(out)
    pairs = data["suggestions"]["pairs"]
    assert pairs and all(p[k]["min_s"] >= 240e-9 for p in pairs for k in ("to_high", "to_low"))
    assert any("below the minimum dead time 240 ns" in " ".join(p["unsafe"])
               for p in data["suggestions"]["rejected"])
    assert code == 0
    code, out, _ = run_cli(["analog", *README_SUGGEST[:-1], "30ns", "--min-dead", "100n"])
    assert code == 1
    assert "--suggest: none of the" in out


def test_wrong_orientation_exits_1() -> None:
    code, out, _ = run_cli(["analog", *NET, "--bypass", "rising"])
    assert code == 1
    assert "not positive" in out


def test_min_dead_above_the_worst_case_exits_1() -> None:
    code, _, _ = run_cli(["analog", *NET, "--min-dead", "400n"])
    assert code == 1


def test_design_file_reference_section(tmp_path: Path) -> None:
    design = tmp_path / "d.toml"
    design.write_text(
        '# invented example\n[reference]\nr = "4.7k"\nc = "100p"\nbypass = "falling"\n'
        'levels = "jedec-3v3"\nvt_plus = "45%:55%"\nvt_minus = "40%:50%"\n'
    )
    code, out, _ = run_cli(["analog", "--design", str(design), "--json"])
    assert code == 0
    assert json.loads(out)["parameters"]["vt_plus"]["value"].endswith("2 V")
    design.write_text('[reference]\nr = "4.7k"\nc = "100p"\nbypas = "falling"\n')
    code, _, err = run_cli(["analog", "--design", str(design)])
    assert code == 2
    assert "reference.bypas" in err and "did you mean 'bypass'" in err


@pytest.mark.parametrize(
    ("args", "where"),
    [
        (["--r", "-4.7k", "--c", "100p"], "--r"),
        (["--r", "4.7k", "--c", "0"], "--c"),
        (["--r", "4.7k", "--c", "100p", "--vt-plus", "5V"], "--vt-plus"),
        (["--r", "4.7k", "--c", "100p", "--vt-minus", "2.2V", "--vt-plus", "2.0V"],
         "--vt-minus"),
        (["--r", "4.7k", "--c", "100p", "--c-tol", "120%"], "--c-tol"),
        (["--r", "4.7k", "--c", "100p", "--monte-carlo", "20M"], "--monte-carlo"),
        (["--r", "4.7k", "--c", "100p", "--diode", "IS=1n BOGUS=2"], "--diode"),
    ],
)
def test_bad_input_is_one_line_exit_2(args: list[str], where: str) -> None:
    code, _out, err = run_cli(["analog", *args])
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and where in lines[0] and "Traceback" not in err


def test_bad_input_in_a_fresh_interpreter() -> None:
    code, _, err = run_subprocess(["analog", "--r", "0", "--c", "100p"])
    assert code == 2
    assert err.strip().count("\n") == 0 and "--r" in err and "Traceback" not in err


def test_help_does_not_import_numpy() -> None:
    code = (
        "import sys\n"
        "from click.testing import CliRunner\n"
        "from gapforge.cli import cli\n"
        "r = CliRunner().invoke(cli, ['analog', '--help'])\n"
        "assert r.exit_code == 0, r.output\n"
        "assert '--vt-plus' in r.output\n"
        "print('numpy' in sys.modules)\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env={"PYTHONPATH": str(REPO / "gen")}, check=True)
    assert proc.stdout.strip() == "False"


def test_model_and_simulation_are_compared_on_every_edge() -> None:
    # the default: the charge integral agrees with the transient (well inside 10 %), while the
    # textbook two-slope form misses the bypassed edge by about 40 % and is shown as a note
    code, out, _ = run_cli(["analog", *NET, "--simulate", "--json"])
    assert code == 0
    data = json.loads(out)
    for edge in ("rising", "falling"):
        e = data["edges"][edge]
        assert e["model"] == "charge integral"
        assert abs(e["model_vs_sim"]) < 0.01
    assert data["edges"]["falling"]["textbook_vs_sim"] < -0.3
    assert data["simulation"]["model_warning"] is False
    assert any(w.startswith("note: the textbook closed form") for w in data["warnings"])
    # a tighter --model-warn than the agreement: the loud warning, on every edge that exceeds it
    code, out, _ = run_cli(["analog", *NET, "--simulate", "--model-warn", "0.001%"])
    assert code == 0
    assert "WARNING: THE MODEL AND THE SIMULATION DISAGREE ON THE FALLING EDGE" in out
    assert "more than --model-warn 0.001 %" in out


def test_model_warn_is_checked() -> None:
    code, _, err = run_cli(["analog", *NET, "--simulate", "--model-warn", "150%"])
    assert code == 2 and "--model-warn" in err


def test_rss_is_labelled_a_statistical_estimate_with_a_note_beyond_the_worst_case() -> None:
    # GUM 4.3.7: a uniform band of half-width a has sigma = a / sqrt(3), so with a few dominant
    # uniform bands typ +/- 3 sigma reaches past the worst-case corners; nothing is clipped
    code, out, _ = run_cli(["analog", *NET])
    assert code == 0
    assert "statistical estimate (RSS, typ +/- 3 sigma)" in out
    assert "RSS 3 sigma" not in out
    assert "[beyond the worst case, see note]" in out and "1.73 a" in out
    code, out, _ = run_cli(["analog", *NET, "--json"])
    data = json.loads(out)
    for key in ("to_high", "to_low"):
        row = data["rss"][key]
        assert row["beyond_worst_case"] is True
        assert row["low_3sigma_s"] < data[key]["min_s"]  # not clipped
        assert row["low_3sigma_s"] == pytest.approx(row["typ_s"] - 3 * row["sigma_s"])
    # normal bands with their ends at 3 sigma: the RSS interval stays inside the corners
    code, out, _ = run_cli(["analog", *NET, "--distribution", "normal", "--json"])
    data = json.loads(out)
    assert all(data["rss"][k]["beyond_worst_case"] is False for k in ("to_high", "to_low"))
    code, out, _ = run_cli(["analog", *NET, "--distribution", "normal"])
    assert "[beyond the worst case" not in out and "statistical estimate" in out


# --- issue 23: the first line answers --min-dead and --suggest; one vocabulary ------------------


def test_the_first_line_answers_min_dead_and_the_json_has_a_verdict() -> None:
    code, out, _ = run_cli(["analog", *NET, "--json"])
    data = json.loads(out)
    assert code == 0 and data["verdict"] == "ok" and data["min_dead_s"] is None
    # 1 us is above every worst-case minimum of this network: the answer is on line one (it
    # used to say "cannot overlap" and exit 1 forty lines later)
    code, text, _ = run_cli(["analog", *NET, "--min-dead", "1us"])
    assert code == 1
    assert text.splitlines()[0].startswith(
        "analog: fail - worst-case minimum of to_high and to_low below --min-dead 1 us;")
    code, out, _ = run_cli(["analog", *NET, "--min-dead", "1us", "--json"])
    data = json.loads(out)
    assert data["verdict"] == "fail" and data["below_min_dead"] == ["to_high", "to_low"]
    assert data["min_dead_s"] == pytest.approx(1e-6)
    code, text, _ = run_cli(["analog", *NET, "--min-dead", "1ns"])
    assert code == 0 and "every worst-case dead time at least --min-dead 1 ns" in text


def test_a_given_parameter_says_given() -> None:
    # issue 23: source named a default's provenance even for a value the user gave
    data = json.loads(run_cli(["analog", *NET, "--json"])[1])
    assert data["parameters"]["r"] == {"value": "4.7 kohm", "default": False, "source": "given"}
    assert data["parameters"]["rout"]["default"] is True
    assert data["parameters"]["rout"]["source"] not in ("", "given")


def test_suggest_a_window_lists_pairs_whose_worst_case_fits_best_centred_first() -> None:
    # issue 23: "which preferred R/C pairs give a worst case inside MIN..MAX". Each proposed
    # pair's worst case is recomputed here by the model's own corner analysis with the series'
    # usual tolerances (IEC 60063 usage: E96 1 %, E12 10 %; reference-facts) and must lie
    # inside the window; the list is ordered by the distance of the range's middle from the
    # window's middle.
    from dataclasses import replace
    from fractions import Fraction

    from gapforge.analog.preferred import series_tolerances
    from gapforge.analog.tolerance import worst_case
    from gapforge.pipeline.design import load_design

    design = REPO / "examples" / "gan-buck.toml"
    code, out, _ = run_cli(["analog", "--design", str(design), "--suggest", "114ns:300ns",
                            "--json"])
    data = json.loads(out)
    sg = data["suggestions"]
    assert sg["window"] == {"min_s": pytest.approx(114e-9), "max_s": pytest.approx(300e-9)}
    assert sg["rank"] == "centred" and sg["pairs"]
    net = load_design(design).reference
    assert net is not None
    base = series_tolerances(net, "E96", "E12")
    middles = []
    for pair in sg["pairs"]:
        r = Fraction(pair["r_ohm"]).limit_denominator(1000)
        c = Fraction(pair["c_f"]).limit_denominator(10**15)
        rng = worst_case(replace(base, r=r, c=c)).pair["to_high"]
        assert Fraction(114, 10**9) <= rng.min_s and rng.max_s <= Fraction(300, 10**9)
        assert pair["to_high"]["min_s"] == pytest.approx(float(rng.min_s), rel=1e-6)
        middles.append(abs((float(rng.min_s) + float(rng.max_s)) / 2 - 207e-9))
    assert middles == sorted(middles)
    # the first line answers the question (and still says the old network can overlap)
    code, text, _ = run_cli(["analog", "--design", str(design), "--suggest", "114ns:300ns"])
    assert code == 1  # gan-buck's own network can overlap: a violated limit
    first = text.splitlines()[0]
    assert first.startswith(f"analog: fail - {len(sg['pairs'])} preferred pairs give a "
                            "worst-case to_high inside 114 .. 300 ns, best centred R ")
    assert "CAN OVERLAP" in first


@pytest.mark.parametrize("bad", ["300ns:114ns", "114ns:", "114ns:300", "114ns:300ns:400ns"])
def test_suggest_a_bad_window_is_one_line_exit_2(bad: str) -> None:
    code, out, err = run_cli(["analog", *NET, "--suggest", bad])
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1 and "--suggest" in err


def test_an_edge_the_model_cannot_resolve_is_refused_not_guessed() -> None:
    # A model card far outside physical parts (N = 0.5, IS = 5.4 mA, up to 200 C) across a
    # 0.13 ohm resistor: the leaking diode's conduction rises by more than the whole step between
    # two adjacent floats, so no float is the end point of the edge. The charge integral once
    # stopped on the step size and returned a delay that was not even monotonic in the
    # threshold (a 5,000-draw Monte Carlo then went 20 % beyond the worst case); now the end
    # point's residual must hold and the network is refused in one line.
    args = ["analog", "--vdd", "1", "--r", "0.1341", "--c", "1F", "--rout", "20.6",
            "--bypass", "falling", "--output-inverter", "--temp", "116:158:200",
            "--diode", "IS=0.00538 N=0.5 RS=4.23 CJO=0 VJ=1.12 M=0.5 EG=1.12 XTI=6.25 BV=3"]
    code, out, err = run_cli(args)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "cannot resolve an edge of this network" in err
    # the same network with a real small-signal diode card resolves and is judged
    sane = [a if not a.startswith("IS=") else "IS=2e-9 N=1.9 RS=0.8 CJO=1p" for a in args]
    code, out, err = run_cli(sane)
    assert code in (0, 1) and "cannot resolve" not in err
