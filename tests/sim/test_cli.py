"""The command line's demo: it runs end to end and prints the three comparisons."""

from sim.cli import main


def test_demo_command_runs(capsys):
    assert main(["demo", "--patients", "3000", "--workers", "1", "--seed", "5"]) == 0
    out = capsys.readouterr().out
    for heading in ("3,000 simulated patients per strategy (seed 5)", "Simulated (mean, Monte Carlo standard error) vs exact",
                    "Incremental analysis", "Cycle-based approximations vs exact", "not for clinical decisions"):
        assert heading in out
    for method in ("per-transition", "competing-exit", "matrix-exponential"):
        assert method in out
