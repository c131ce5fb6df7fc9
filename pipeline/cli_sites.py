"""``sites`` command: list the ionizable sites of molecules as JSON lines."""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Iterator

import click
from rdkit import Chem, RDLogger

from pkasite.features.sites import find_sites
from pkasite.features.standardize import smiles_text_problem


def _read_input(path: Path) -> Iterator[tuple[str, str | None]]:
    """Yield (smiles, name) from a SMILES file (``SMILES [name]`` per line) or a CSV with a ``smiles`` column."""
    with path.open(encoding="utf-8", newline="") as handle:
        lines = handle.read().splitlines()
    header = next((line for line in lines if line.strip()), "")
    columns = [c.strip().lower() for c in next(csv.reader([header]))] if header else []
    if path.suffix.lower() == ".csv" or ("smiles" in columns and len(columns) > 1):
        if "smiles" not in columns:
            raise click.UsageError(f"{path}: CSV input needs a 'smiles' column; found {columns}")
        for row in csv.DictReader(lines):
            row = {k.strip().lower(): (v or "").strip() for k, v in row.items() if k}
            yield row["smiles"], row.get("name") or row.get("id") or None
        return
    for line in lines:
        tokens = line.split()
        if tokens:
            yield tokens[0], tokens[1] if len(tokens) > 1 else None


def _describe(smiles: str, name: str | None) -> dict:
    """One output record: the sites of ``smiles`` or the reason it could not be read."""
    record: dict = {"smiles": smiles}
    if name is not None:
        record["name"] = name
    if smiles and (problem := smiles_text_problem(smiles)):
        record["error"] = problem
        return record
    mol = Chem.MolFromSmiles(smiles) if smiles else None
    if mol is None or mol.GetNumAtoms() == 0:
        record["error"] = "unreadable SMILES" if smiles else "empty SMILES"
        return record
    try:
        sites = find_sites(mol)
    except Exception as exc:  # one bad molecule must not stop the batch
        record["error"] = f"site perception failed: {exc}"
        return record
    record["sites"] = [{"atom": s.atom, "type": s.type, "kind": s.kind} for s in sites]
    return record


@click.command("sites")
@click.argument("smiles", nargs=-1)
@click.option(
    "--input",
    "input_path",
    type=click.Path(exists=True, dir_okay=False, path_type=Path),
    help="File with one SMILES per line (optional name after whitespace) or a CSV with a 'smiles' column.",
)
def sites_command(smiles: tuple[str, ...], input_path: Path | None) -> None:
    """Print the ionizable sites of each molecule as one JSON object per line, in input order."""
    if not smiles and input_path is None:
        raise click.UsageError("give SMILES arguments or --input FILE")
    RDLogger.DisableLog("rdApp.*")
    records = [(s, None) for s in smiles]
    if input_path is not None:
        records.extend(_read_input(input_path))
    for smi, name in records:
        click.echo(json.dumps(_describe(smi, name)))
