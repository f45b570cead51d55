"""The contract kit fails, with clear messages, on deliberately broken plugins (each wraps a real
adapter and breaks one thing): wrong node order, a dropped mode, an undeclared capability used,
a false capability declared."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from bridge.errors import DeckWriteError
from bridge.solver import Capabilities, SolverOption
from bridge.testing import ContractError, assert_contract, check_declarations
from modebridge_calculix.adapter import CalculixAdapter
from modebridge_opensees.adapter import OpenSeesAdapter

pytestmark = pytest.mark.solver


class _Wrapped:
    """A well-behaved plugin that offers a subset of a real adapter's capabilities."""

    def __init__(self, inner, families, supports=("simply_supported",), options=()):
        self.inner = inner
        self.name = inner.name
        self.label = f"wrapped {inner.label}"
        self.capabilities = Capabilities(families=frozenset(families), supports=frozenset(supports),
                                         options=tuple(options))

    def locate(self):
        return self.inner.locate()

    def version(self):
        return self.inner.version()

    def write_deck(self, job, workdir):
        if job.family not in self.capabilities.families:
            raise DeckWriteError(f"no element for '{job.family}'")
        return self.inner.write_deck(job, workdir)

    def run(self, job, workdir):
        return self.inner.run(job, workdir)

    def read_results(self, job, workdir, record):
        return self.inner.read_results(job, workdir, record)


def _failures(adapter, tmp_path) -> str:
    with pytest.raises(ContractError) as exc:
        assert_contract(adapter, tmp_path)
    return str(exc.value)


def test_a_correct_subset_passes(ccx, tmp_path):
    assert_contract(_Wrapped(CalculixAdapter(), {"quad8"}), tmp_path)  # the control for the tests below


class _WrongNodeOrder(_Wrapped):
    """Writes quad8 elements with two mid-edge nodes swapped (a node-order map gone wrong)."""

    def write_deck(self, job, workdir):
        if job.family != "quad8":
            return super().write_deck(job, workdir)
        cells = job.cells.copy()
        cells[:, [4, 5]] = cells[:, [5, 4]]
        return super().write_deck(dataclasses.replace(job, cells=cells), workdir)


def test_wrong_node_order_fails(ccx, tmp_path):
    text = _failures(_WrongNodeOrder(CalculixAdapter(), {"quad8"}), tmp_path)
    assert "plugin 'calculix' breaks the contract" in text
    # CalculiX itself stops on the distorted elements ("nonpositive jacobian"); a solver that ran
    # on would fail the frequency, MAC and mass checks instead (see the dropped-mode test)
    assert "family 'quad8' on plate_simply_supported: the run failed" in text
    assert "(1 failure(s))" in text  # the control (test_a_correct_subset_passes) passes the rest


class _DroppedMode(_Wrapped):
    """Asks the solver for one mode more and leaves out the second: the count still matches."""

    def write_deck(self, job, workdir):
        return super().write_deck(dataclasses.replace(job, modes=job.modes + 1), workdir)

    def read_results(self, job, workdir, record):
        raw = self.inner.read_results(dataclasses.replace(job, modes=job.modes + 1), workdir, record)
        keep = np.delete(np.arange(raw.frequencies.size), 1)
        return dataclasses.replace(raw, frequencies=raw.frequencies[keep], eigenvalues=raw.eigenvalues[keep],
                                   shapes=raw.shapes[keep], participation=None, effective_mass=None,
                                   total_effective_mass=None)


def test_dropped_mode_fails(ccx, tmp_path):
    text = _failures(_DroppedMode(CalculixAdapter(), {"quad8"}), tmp_path)
    # mode 2 is now the (1, 2) mode: 60 % above Navier's (2, 1) and another shape
    assert "family 'quad8' on plate_simply_supported: mode 2 at" in text
    assert "mode 2 shape has MAC" in text


class _UndeclaredUsed(_Wrapped):
    """Declares quad8 only but writes a deck for any family it is handed."""

    def write_deck(self, job, workdir):
        return self.inner.write_deck(job, workdir)


def test_undeclared_capability_used_fails(ccx, tmp_path):
    text = _failures(_UndeclaredUsed(CalculixAdapter(), {"quad8"}), tmp_path)
    assert "write_deck accepted family 'hex20', which it does not declare" in text
    assert "write_deck accepted family 'quad4', which it does not declare" in text


def test_false_capability_declared_fails(three_solvers, tmp_path):
    """OpenSees has no 8-node shell and no ShellNLDKGQ choice in its deck: declaring them is caught."""
    quad_shell = SolverOption("quad_shell", str, "ShellMITC4", "quad shell",
                              choices=("ShellMITC4", "ShellNLDKGQ"), applies_to=("quad4",))
    liar = _Wrapped(OpenSeesAdapter(), {"quad4", "quad8"}, options=[quad_shell])
    liar.write_deck = liar.inner.write_deck  # passes every job to the real deck writer
    text = _failures(liar, tmp_path)
    assert "plugin 'opensees': declares family 'quad8' but write_deck refused it" in text
    assert "declares option quad_shell = 'ShellNLDKGQ' (on quad4) but write_deck refused it" in text
    assert "family 'quad8' on plate_simply_supported: the run failed" in text


def test_declarations_are_checked_first():
    bad = _Wrapped(CalculixAdapter(), {"quad8", "quad5"}, supports=("clamped", "glued"),
                   options=[SolverOption("Tol", float, "x", "")])
    text = "\n".join(check_declarations(bad))
    assert "declares family 'quad5', unknown to the element registry" in text
    assert "declares support kind 'glued'" in text
    assert "option name 'Tol' is not lower_case" in text and "default 'x' is not a float" in text
    assert "option 'Tol' has no help text" in text


def test_node_orders_come_from_the_registry():
    """The bundled plugins register their gmsh -> solver node orders, and the decks read them there;
    a plugin that registers none for a declared family is told so."""
    from bridge.elements import get_family
    from bridge.testing import check_node_orders
    from modebridge_calculix.deck import NODE_ORDER
    from modebridge_kratos.adapter import KratosAdapter

    for adapter in (CalculixAdapter(), KratosAdapter(), OpenSeesAdapter()):
        assert check_node_orders(adapter) == []
    # CalculiX's C3D10 takes gmsh's mid-edge nodes 9 and 10 swapped (CalculiX manual, element C3D10)
    assert get_family("tet10").node_orders["calculix"] == tuple(NODE_ORDER["tet10"]) == (0, 1, 2, 3, 4, 5, 6, 7, 9, 8)

    class _Unregistered(_Wrapped):
        def __init__(self, inner, families):
            super().__init__(inner, families)
            self.name = "unregistered"

    text = "\n".join(check_node_orders(_Unregistered(CalculixAdapter(), {"quad8"})))
    assert "plugin 'unregistered': declares family 'quad8' but registered no node order for it" in text
