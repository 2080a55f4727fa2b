"""The calculator command: JSON keys, units, and one-line errors with exit status 2."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from firewatch.cli import main


def run_json(capsys, *argv: str) -> dict:
    assert main(["calc", *argv, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_tc_emf_to_temperature(capsys) -> None:
    out = run_json(capsys, "tc", "--type", "K", "--emf", "41.276")
    assert set(out) == {"type", "emf_mv", "temperature_c", "cold_junction_c"}
    assert out["type"] == "K" and out["cold_junction_c"] == 0.0
    assert out["temperature_c"] == pytest.approx(1000.0, abs=0.013)  # NIST Monograph 175, K 1000 degC = 41.276 mV


def test_tc_with_cold_junction_and_back(capsys) -> None:
    # K at 25 degC = 1.000 mV (NIST Monograph 175): 40.276 mV at a 25 degC junction is 1000 degC.
    out = run_json(capsys, "tc", "--type", "k", "--emf", "40.276", "--cold-junction", "25")
    assert out["temperature_c"] == pytest.approx(1000.0, abs=0.03)
    back = run_json(capsys, "tc", "--type", "K", "--temperature", "1000", "--cold-junction", "25")
    assert back["emf_mv"] == pytest.approx(40.276, abs=0.001)


def test_units_in_fahrenheit_json_stays_celsius(capsys) -> None:
    out = run_json(capsys, "tc", "--type", "K", "--temperature", "1832", "--units", "F")
    assert out["temperature_c"] == pytest.approx(1000.0)
    assert out["emf_mv"] == pytest.approx(41.276, abs=0.0005)  # NIST Monograph 175


def test_pyro(capsys) -> None:
    out = run_json(capsys, "pyro", "--indicated", "1200", "--band", "0.8:1.1", "--emissivity", "0.85",
                   "--emissivity-uncertainty", "0.02")
    assert {"corrected_c", "uncertainty_c", "transmission"} <= set(out)
    assert out["transmission"] == 1.0
    assert 1215 < out["corrected_c"] < 1235 and out["uncertainty_c"] > 0  # common practice, no source
    win = run_json(capsys, "pyro", "--indicated", "1200", "--band", "0.89:0.91", "--emissivity", "1",
                   "--window", "fused-silica")
    assert win["transmission"] == pytest.approx(0.934, abs=0.001)  # 2n/(n^2+1) at Malitson 1965's n = 1.45175 (0.90 um)


def test_pyro_predicts_reading(capsys) -> None:
    # clean fused silica reads about 7 K low at 1000 degC and 0.9 um (Wien form, DeWitt & Nutter 1988: 6.9 K)
    out = run_json(capsys, "pyro", "--true", "1000", "--band", "0.89:0.91", "--emissivity", "1", "--window", "fused-silica")
    assert 6.5 < 1000 - out["indicated_c"] < 7.5
    assert out["corrected_c"] == pytest.approx(1000.0, abs=1e-3)


def test_ratio(capsys) -> None:
    out = run_json(capsys, "ratio", "--indicated", "1000", "--band1", "0.945:0.955", "--band2", "1.045:1.055", "--slope", "1.01")
    assert 1000 - out["corrected_c"] == pytest.approx(11.0, abs=0.5)  # Wien ratio form (DeWitt & Nutter 1988), about 11 K


def test_window(capsys) -> None:
    out = run_json(capsys, "window", "--material", "sapphire", "--band", "1.59:1.61", "--temperature", "1100")
    assert out["transmission"] == pytest.approx(0.8627, abs=2e-4)  # 2n/(n^2+1) at Malitson & Dodge 1972's n_o = 1.74530


def test_window_states_the_dispersion_formulas_validity(capsys) -> None:
    # issue 12: the index at the end of the formula's validity was reported as the band's.
    # Malitson 1965's fused-silica formula holds from 0.21 to 3.71 um.
    thermal = run_json(capsys, "window", "--material", "fused-silica", "--band", "8:14")
    assert thermal["refractive_index"] is None and thermal["dispersion_valid_um"] == [0.21, 3.71]
    assert "outside the dispersion formula's validity" in thermal["dispersion_note"]
    partly = run_json(capsys, "window", "--material", "fused-silica", "--band", "3:4")
    assert partly["refractive_index"] is not None and "runs past" in partly["dispersion_note"]
    inside = run_json(capsys, "window", "--material", "fused-silica", "--band", "0.89:0.91")
    assert inside["refractive_index"] == pytest.approx(1.45175, abs=5e-5) and inside["dispersion_note"] is None  # Malitson 1965
    assert main(["calc", "window", "--material", "fused-silica", "--band", "8:14"]) == 0
    text = capsys.readouterr().out
    assert "0.21-3.71 um" in text and "none: 11 um is outside" in text


def test_pyro_monte_carlo_interval(capsys) -> None:
    # issue 12: an asymmetric 95 % interval on request (JCGM 101:2008), reproducible for a seed
    argv = ["pyro", "--indicated", "1200", "--band", "0.8:1.1", "--emissivity", "0.5", "--emissivity-uncertainty", "0.1"]
    out = run_json(capsys, *argv, "--monte-carlo", "--draws", "20000")
    mc = out["monte_carlo"]
    assert set(mc) == {"draws", "seed", "mean_c", "u_c", "ci95_c", "undefined_fraction"} and mc["draws"] == 20000
    low, high = mc["ci95_c"]
    t, u = out["corrected_c"], out["uncertainty_c"]
    assert high - t > 1.3 * (t - low)  # the hot side is longer: T goes as an inverse power of e
    assert high - t > 1.96 * u * 1.15  # and longer than first-order propagation says (regression bound)
    assert out["linear_unreliable"] and "u(e)/e = 0.20" in out["linear_unreliable"]
    again = run_json(capsys, *argv, "--monte-carlo", "--draws", "20000")
    assert again["monte_carlo"]["ci95_c"] == mc["ci95_c"]
    # where first-order propagation is fine there is no note
    plain = run_json(capsys, "pyro", "--indicated", "1200", "--band", "0.8:1.1", "--emissivity", "0.88", "--emissivity-uncertainty", "0.02")
    assert plain["linear_unreliable"] is None and "monte_carlo" not in plain
    # the people's table: the interval as "A to B", and the note
    assert main(["calc", *argv, "--monte-carlo", "--draws", "1000"]) == 0
    text = capsys.readouterr().out
    assert "95 % interval (Monte Carlo" in text and " to " in text and "note: first-order uncertainty unreliable" in text
    assert main(["calc", *argv]) == 0
    assert "calc pyro --monte-carlo" in capsys.readouterr().out


def test_people_table(capsys) -> None:
    assert main(["calc", "window", "--material", "calcium-fluoride", "--band", "0.8:1.0"]) == 0
    text = capsys.readouterr().out
    assert "band-effective transmission" in text and "0.939" in text  # 2n/(n^2+1) at Malitson 1963's index near 0.9 um, ~0.939 (from memory)


@pytest.mark.parametrize(
    ("argv", "fragment"),
    [
        (["pyro", "--indicated", "1200", "--band", "0.8:1.1", "--emissivity", "1.2"], "--emissivity: must be in (0, 1], got 1.2"),
        (["pyro", "--indicated", "1200", "--band", "1.1:0.8", "--emissivity", "0.9"], "--band: band must satisfy"),
        (["pyro", "--indicated", "1200", "--band", "abc", "--emissivity", "0.9"], "--band: expected START:END"),
        (["tc", "--type", "Q", "--emf", "1"], "--type: unknown thermocouple type 'Q'"),
        (["tc", "--type", "K", "--temperature", "2000"], "--temperature: type K temperature (degC) 2000 is outside"),
        (["tc", "--type", "B", "--emf", "0.1"], "--emf: type B EMF"),
        (["window", "--material", "glass", "--band", "1:2"], "--material: unknown window material 'glass'"),
        (["pyro", "--indicated", "1200", "--band-file", "/no/such.csv", "--emissivity", "0.9"], "--band-file: no such file"),
        (["pyro", "--indicated", "9000", "--band", "0.8:1.1", "--emissivity", "0.9"], "--indicated:"),
        # issue 12: the exact rejected value, not a rounded one (type K's range ends at 1372 degC, NIST Monograph 175)
        (["tc", "--type", "K", "--temperature", "1372.0001"], "1372.0001 is outside -270..1372 degC"),
        # issue 12: one reading below its background is an error, as the README says
        (["pyro", "--indicated", "900", "--band", "0.8:1.1", "--emissivity", "0.5", "--background", "1150"],
         "--indicated: indicated temperature (degC) 900 lies below what the background at 1150 degC"),
        (["pyro", "--indicated", "900", "--band", "0.8:1.1", "--emissivity", "0.5", "--monte-carlo", "--draws", "5"],
         "--draws: must be at least 100"),
        (["pyro", "--indicated", "900", "--band", "0.8:1.1", "--emissivity", "0.5", "--background-uncertainty", "5"],
         "--background-uncertainty: needs --background"),
    ],
)
def test_bad_input_one_line_exit_2(capsys, argv: list[str], fragment: str) -> None:
    with pytest.raises(SystemExit) as exc_info:
        code = main(["calc", *argv])
        raise SystemExit(code)
    assert exc_info.value.code == 2
    err = capsys.readouterr().err
    assert fragment in err
    assert err.count("\n") == 1 and "Traceback" not in err


def test_real_process_bad_input_and_fast_help() -> None:
    proc = subprocess.run(
        [sys.executable, "-m", "firewatch", "calc", "pyro", "--indicated", "1", "--band", "0.8:1.1", "--emissivity", "0"],
        capture_output=True, text=True, timeout=60,
    )
    assert proc.returncode == 2 and proc.stderr.count("\n") == 1 and "Traceback" not in proc.stderr
    # --help imports neither textual nor scipy (issue 2: heavy imports only where needed)
    probe = (
        "import sys, contextlib, io\n"
        "from firewatch.cli import main\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        "    try: main(['--help'])\n"
        "    except SystemExit: pass\n"
        "print(','.join(m for m in ('textual', 'scipy', 'numpy') if m in sys.modules))\n"
    )
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=60)
    assert out.returncode == 0 and out.stdout.strip() == ""
