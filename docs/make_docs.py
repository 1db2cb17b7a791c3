"""Regenerate docs/commands.md and docs/flags.md from the command line's help and vsini.flags.

Run: ``python docs/make_docs.py``. A test checks the committed pages are up to date.
"""

from pathlib import Path

HERE = Path(__file__).resolve().parent


def _commands(app, prefix):
    """(full command name, typer command info) for every command, depth first, in registration order."""
    for info in app.registered_commands:
        name = info.name or info.callback.__name__.replace("_", "-")
        yield f"{prefix} {name}", info
    for group in app.registered_groups:
        yield from _commands(group.typer_instance, f"{prefix} {group.name}")


def commands_page():
    """Markdown of every command's help text (as the terminal shows it, 100 columns wide)."""
    import os

    from typer.testing import CliRunner

    from vsini.cli import app

    os.environ["COLUMNS"] = "100"
    runner = CliRunner()
    out = ["# Commands", "", "Generated from the command line's `--help` by `python docs/make_docs.py`; do not edit by hand.", ""]
    for full, _ in _commands(app, "vsini"):
        res = runner.invoke(app, full.split()[1:] + ["--help"], env={"COLUMNS": "100", "TERM": "dumb"})
        text = "\n".join(line.rstrip() for line in res.output.splitlines()).strip("\n")
        out += [f"## `{full}`", "", "```text", text, "```", ""]
    return "\n".join(out)


def flags_page():
    """Markdown tables of every flag: measurement flags, then the inclination and deprojection flags."""
    from vsini.deprojection import DEPROJECTION_FLAGS
    from vsini.flags import FLAGS
    from vsini.inclination import INCLINATION_FLAGS

    out = ["# Result flags", "", "Generated from `vsini.flags.FLAGS`, `vsini.inclination.INCLINATION_FLAGS` and "
           "`vsini.deprojection.DEPROJECTION_FLAGS` by `python docs/make_docs.py`; do not edit by hand.", ""]
    for title, table in (("Measurements (results tables, `vsini measure`, `vsini survey`)", FLAGS),
                         ("Inclination (`vsini inclination infer`)", INCLINATION_FLAGS),
                         ("Deprojection (`vsini inclination deproject`)", DEPROJECTION_FLAGS)):
        out += [f"## {title}", "", "| flag | meaning |", "|---|---|"]
        out += [f"| `{k}` | {v} |" for k, v in table.items()]
        out.append("")
    return "\n".join(out)


if __name__ == "__main__":
    (HERE / "commands.md").write_text(commands_page())
    (HERE / "flags.md").write_text(flags_page())
    print("wrote docs/commands.md and docs/flags.md")
