"""Rolling-element bearing defect frequencies from geometry and shaft rate."""

from __future__ import annotations

import math
from dataclasses import dataclass

from edge_agent.dsp._validation import check_positive

__all__ = ["DefectFrequencies", "defect_frequencies"]


@dataclass(frozen=True, slots=True)
class DefectFrequencies:
    """Bearing defect frequencies, Hz (or multiples of shaft speed when ``shaft_hz`` = 1).

    Attributes
    ----------
    ftf : float
        Fundamental train (cage) frequency.
    bsf : float
        Ball (rolling-element) spin frequency. A spall on an element strikes both races once per
        spin, so spectra often show ``2 * bsf`` (the "rolling element" multiple of some tables).
    bpfo : float
        Ball-pass frequency, outer race.
    bpfi : float
        Ball-pass frequency, inner race.
    """

    ftf: float
    bsf: float
    bpfo: float
    bpfi: float

    def as_dict(self) -> dict[str, float]:
        return {"ftf": self.ftf, "bsf": self.bsf, "bpfo": self.bpfo, "bpfi": self.bpfi}


def defect_frequencies(
    shaft_hz: float,
    *,
    n_elements: int,
    element_diameter: float,
    pitch_diameter: float,
    contact_angle_deg: float = 0.0,
) -> DefectFrequencies:
    """Kinematic defect frequencies of a bearing with a stationary outer race.

    With r = (d / D) cos(phi) and shaft rate fr: FTF = fr/2 (1 - r), BSF = D/(2d) fr (1 - r²),
    BPFO = n/2 fr (1 - r), BPFI = n/2 fr (1 + r). Real bearings slip: expect the lines 1-2 %
    away from these values.

    Parameters
    ----------
    shaft_hz : float
        Shaft rotation frequency, Hz (> 0).
    n_elements : int
        Rolling elements per row (>= 3).
    element_diameter, pitch_diameter : float
        Rolling-element diameter d and pitch diameter D, any one unit, d < D.
    contact_angle_deg : float
        Contact angle phi, degrees, 0 <= phi < 90.

    Returns
    -------
    DefectFrequencies

    References
    ----------
    .. [1] R. B. Randall, J. Antoni, "Rolling element bearing diagnostics - a tutorial",
       Mech. Syst. Signal Process. 25 (2011) 485-520, eqs. 1-4.

    Examples
    --------
    >>> f = defect_frequencies(1.0, n_elements=9, element_diameter=0.3126, pitch_diameter=1.537)
    >>> round(f.bpfo, 4), round(f.bpfi, 4)
    (3.5848, 5.4152)
    """
    fr = check_positive(shaft_hz, name="shaft_hz")
    if int(n_elements) != n_elements or n_elements < 3:
        raise ValueError(f"n_elements must be an integer >= 3, got {n_elements!r}")
    d = check_positive(element_diameter, name="element_diameter")
    big_d = check_positive(pitch_diameter, name="pitch_diameter")
    if d >= big_d:
        raise ValueError(
            f"element_diameter must be smaller than pitch_diameter, got d={d:g}, D={big_d:g}"
        )
    if not 0.0 <= contact_angle_deg < 90.0:
        raise ValueError(f"contact_angle_deg must be in [0, 90), got {contact_angle_deg!r}")
    r = d / big_d * math.cos(math.radians(contact_angle_deg))
    n = int(n_elements)
    return DefectFrequencies(
        ftf=0.5 * fr * (1.0 - r),
        bsf=big_d / (2.0 * d) * fr * (1.0 - r * r),
        bpfo=0.5 * n * fr * (1.0 - r),
        bpfi=0.5 * n * fr * (1.0 + r),
    )
