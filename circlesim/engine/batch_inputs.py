"""The inputs of a batch: members assembled in groups and stacked in member order (engine layer).

:func:`assemble_members` is :func:`circlesim.engine.assembly.assemble` for a batch: members that
share breathing system, absorber, vaporizer and plan are assembled together
(:func:`~circlesim.engine.assembly.assemble_group`, vectorised over patients), and
:class:`MemberInputs` stacks the groups' arrays for the batch integrator and gives each member's
:class:`~circlesim.engine.assembly.ModelInputs` on access.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from circlesim.base.validation import InputError
from circlesim.domain.equipment import Absorber, Circuit, Vaporizer
from circlesim.domain.patient import Patient
from circlesim.domain.plan import Plan
from circlesim.engine.assembly import GroupInputs, ModelInputs, assemble_group

__all__ = ["MemberInputs", "assemble_members"]


def assemble_members(patients: Sequence[Patient], circuits: Sequence[Circuit],
                     absorbers: Sequence[Absorber], vaporizers: Sequence[Vaporizer],
                     plans: Sequence[Plan]) -> MemberInputs:
    """Build the inputs of a batch: member ``b`` is ``patients[b]`` with ``circuits[b]``, …

    Members sharing breathing system, absorber, vaporizer and plan (the same objects) are
    assembled together by :func:`assemble_group`.

    Raises
    ------
    InputError
        As :func:`assemble`, naming the batch member.
    """
    keys: dict[tuple[int, ...], list[int]] = {}
    for b in range(len(patients)):
        key = tuple(id(items[b]) for items in (circuits, absorbers, vaporizers, plans))
        keys.setdefault(key, []).append(b)
    groups = []
    for members in keys.values():
        b0 = members[0]
        try:
            grp = assemble_group([patients[b] for b in members], circuits[b0], absorbers[b0],
                                 vaporizers[b0], plans[b0])
        except InputError as exc:
            message = str(exc)
            if len(members) == 1 or not message.startswith("batch member "):
                raise InputError(f"batch member {b0}: {message}") from None
            k, rest = message[len("batch member "):].split(": ", 1)
            raise InputError(f"batch member {members[int(k)]}: {rest}") from None
        groups.append((np.asarray(members, dtype=np.int64), grp))
    return MemberInputs(tuple(groups), len(patients))


class MemberInputs(Sequence[ModelInputs]):
    """The inputs of a batch: the groups' arrays stacked in member order, and each member's
    :class:`ModelInputs` made on access.

    Shorter plans get empty segments at the end: an empty segment starts and ends at the
    plan's end time, has no jump and repeats the last segment's parameters, so it leaves the
    state exactly as it was.

    Attributes
    ----------
    groups : tuple of (ndarray of int, GroupInputs)
        Member indices and inputs of each group.
    lay : ndarray of int64
        The model layout (the first group's; the caller checks that all agree).
    y0 : ndarray, shape (B, n_state)
    params : ndarray, shape (B, n_segments, n_params)
    seg_times : ndarray, shape (B, n_segments + 1), min
    jumps : ndarray, shape (B, n_segments, n_state)
    k_circuit : ndarray, shape (B,)
        L STPD per litre at flowmeter and circuit conditions.
    """

    def __init__(self, groups: tuple[tuple[np.ndarray, GroupInputs], ...], n: int) -> None:
        self.groups = groups
        first = groups[0][1]
        self.lay = first.lay
        n_seg = max(grp.params.shape[1] for _, grp in groups)
        n_state = first.y0.shape[1]
        self.params = np.empty((n, n_seg, first.params.shape[2]))
        self.seg_times = np.empty((n, n_seg + 1))
        self.jumps = np.zeros((n, n_seg, n_state))
        self.y0 = np.empty((n, n_state))
        self.k_circuit = np.empty(n)
        self._where = np.empty((n, 2), dtype=np.int64)
        for g, (members, grp) in enumerate(groups):
            k = grp.params.shape[1]
            self.params[members, :k] = grp.params
            self.params[members, k:] = grp.params[:, -1:]
            self.seg_times[members, :k + 1] = grp.seg_times
            self.seg_times[members, k + 1:] = grp.seg_times[-1]
            self.jumps[members, :k] = grp.jumps
            self.y0[members] = grp.y0
            self.k_circuit[members] = grp.k_circuit
            self._where[members, 0] = g
            self._where[members, 1] = np.arange(len(members))

    def __len__(self) -> int:
        return len(self._where)

    def __getitem__(self, b):  # type: ignore[override]
        if isinstance(b, slice):
            return [self[i] for i in range(*b.indices(len(self)))]
        g, k = (int(v) for v in self._where[b])
        return self.groups[g][1].member(k)
