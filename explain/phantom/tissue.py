"""Tissue values and vessel sizes the phantoms are drawn from, each with its source.

Attenuation (Hounsfield units; water 0, air -1000 by the definition of the scale):

- enhanced coronary lumen: about 350 HU aimed for, 346 +/- 24 HU reached
  (Kawaguchi et al., Circ J 2014;78:662-670);
- epicardial fat: about -80 HU (Monti et al., J Clin Med 2021;10:735);
- enhanced myocardium: about 100-150 HU (from memory, low confidence);
- non-calcified plaque: 58 +/- 43 HU and 121 +/- 34 HU for its two echo classes
  (Pohle et al., Atherosclerosis 2007;190:174-180); we draw 40-110 HU, inside 30-130 HU;
- calcified plaque: above 350 HU (common practice in plaque quantification, medium); we draw
  700-900 HU, far above the 130 HU calcium threshold of Agatston et al. (JACC 1990;15:827-832).

Proximal lumen diameters of a right-dominant tree (Dodge et al., Circulation 1992;86:232-246;
SD about 0.5 mm): left main 4.5 mm, proximal LAD 3.7 mm, proximal LCx 3.4 mm, proximal RCA
4.0 mm. The diameters further down each vessel and of the side branches are our own tapering
guesses (from memory, low confidence), chosen only to shrink smoothly towards the periphery.
"""

from __future__ import annotations

__all__ = [
    "LUMEN_HU",
    "LUMEN_SD_HU",
    "FAT_HU",
    "MYOCARDIUM_HU",
    "SOFT_PLAQUE_HU",
    "CALCIFIED_PLAQUE_HU",
    "NOISE_SD_HU",
    "BLUR_SIGMA_MM",
    "DODGE_PROXIMAL_MM",
    "DODGE_SD_MM",
    "DIAMETER_KNOTS_MM",
]

LUMEN_HU = 350.0  # Kawaguchi 2014: target
LUMEN_SD_HU = 24.0  # Kawaguchi 2014: spread reached between patients
FAT_HU = -80.0  # Monti 2021
MYOCARDIUM_HU = (100.0, 150.0)  # from memory, low confidence
SOFT_PLAQUE_HU = (40.0, 110.0)  # inside Pohle 2007's 30-130 HU
CALCIFIED_PLAQUE_HU = (700.0, 900.0)  # > 350 HU (common practice), > 130 HU (Agatston 1990)
NOISE_SD_HU = (20.0, 30.0)  # image noise of a CCTA, common practice, no source
BLUR_SIGMA_MM = 0.4  # point spread of a CCTA (FWHM about 0.95 mm), from memory, low confidence

#: Dodge et al. 1992, proximal lumen diameters (mm) by the segment where each vessel starts.
DODGE_PROXIMAL_MM = {1: 4.0, 5: 4.5, 6: 3.7, 11: 3.4}
DODGE_SD_MM = 0.5

#: Lumen diameter (mm) at the start and the end of each segment. The starts of 1, 5, 6 and 11
#: are Dodge 1992; every other number is a tapering guess (from memory, low confidence).
DIAMETER_KNOTS_MM = {
    1: (4.0, 3.7),
    2: (3.7, 3.3),
    3: (3.3, 2.8),
    4: (2.2, 1.5),
    16: (2.2, 1.5),
    5: (4.5, 4.3),
    6: (3.7, 3.3),
    7: (3.3, 2.5),
    8: (2.5, 1.5),
    9: (2.4, 1.5),
    10: (2.0, 1.3),
    11: (3.4, 3.1),
    13: (3.1, 2.1),
    12: (2.5, 1.6),
    14: (2.1, 1.4),
    17: (2.4, 1.6),
    18: (2.0, 1.4),
}
