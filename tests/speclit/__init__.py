"""A second, independent season writer: an invented world written literally to
catalog v1 (``shared/spec/catalog-v1.md``), from the physics of lightning.

It exists so that pulsesort can be measured on data it did not make. Nothing
here reads or imitates ``features.simulate`` or pulsesort's feature code; the
field model, current waveforms, flashes and instrument are derived here
(``_physics``, ``_classes``, ``_flashes``, ``_instrument``, ``_vhf``). Test
infrastructure, not a package: import it as ``tests.speclit`` from the
repository root.

>>> from tests.speclit import write_season, PROFILES                # doctest: +SKIP
>>> path, labels = write_season("out/hm", n_events=4000, seed=1, profile="shifted")  # doctest: +SKIP

writes ``out/hm/`` (catalog.json, events.csv, field.npy, vhf.npy, sources.csv),
``out/hm.labels.csv`` (``event_id,label,analyst,decided_at,note``; analyst
``truth``; for ``pulsesort labels import``) and ``out/hm.truth.csv`` (class,
flash, source altitude m, horizontal distance m, azimuth, vertical
current-moment peak A m, vertical charge-moment change C m, peak current A
(+ = upward-directed current), the discharge's or leader's velocity m/s).
``python -m tests.speclit OUT --events N --seed S --profile P [--classes ...]``
does the same from a shell.

The world
---------
Scenes (isolated NBEs, intracloud flashes, negative cloud-to-ground flashes;
see ``_flashes``) hold pulses of the classes ``narrow_bipolar``,
``stepped_leader``, ``recoil``, ``energetic_in_cloud``, ``return_stroke`` and
``initial_breakdown``, each a transmission-line current wave on a straight
segment whose vertical field at the station is computed with its
electrostatic, induction and radiation terms over a conducting ground
(``_physics``). Pulses come with their neighbours: leader-step trains, return
strokes ~15-35 us after the last step, initial-breakdown pulses with faster
sub-pulses, recoil leaders in quick succession, pulses on the decaying tails
of earlier ones, distant sferics at random times (below the trigger level).
The label of an event is the class of the pulse at its trigger.

Times: ``time_utc`` is the trigger as the field digitizer stamps it (physical
arrival plus ``field.delay_s``); VHF rows start ``vhf.pretrigger_s`` before it
on the VHF channel's own clock (so they carry that channel's delay); a mapped
source's ``t_s`` is its physical arrival at the station minus ``time_utc``.
``range_m`` is the ground distance of the triggering pulse's start with 2 %
error.

Profiles (``PROFILES``; every key can be overridden by keyword)
---------------------------------------------------------------
========  ========  ======  ===========  ======  =========  =====  ========  =======  ======
profile   practice  field   units, sign  RC      noise      clip   VHF       sources  range
========  ========  ======  ===========  ======  =========  =====  ========  =======  ======
plain     every     20 MHz  V/m float32  1 ms    0.05 V/m   250    power     az/el    yes
                    pre 100 us / 200 us  physics            V/m    25 MHz    + x/y/z  flash
shifted   every     12.5    int16 counts 0.5 ms  0.008 V/m  600    power     az/el    yes
                    MHz     0.02 V/m/ct  atmos.  (0.4 ct)   V/m    10 MHz    no xyz   no flash
                    pre 40 us / 160 us, cable delays 0.24 us field, 1.1 us VHF
harder    every     20 MHz  V/m float32  0.1 ms  0.125 V/m  60     power     30 %     no range
                    (as plain; storms 3-120 km, trigger 1.5 V/m)   V/m              outages
records   records   10 MHz  V/m float32  DC      0.05 V/m   400    voltage   az/el    yes
                    pre 10 us / 400 us, dead time 1 ms   V/m    100 MHz   + x/y/z
                                                                30-48 MHz, NBEs saturate
near      every     5 MHz   V/m float32  10 ms   0.2 V/m    1500   power     x/y/z    yes
                    storms 3-25 km, all six classes      V/m    5 MHz
========  ========  ======  ===========  ======  =========  =====  ========  =======  ======

``plain`` follows the spec's example manifest (20 MHz, 100 us pre-trigger,
physics sign, 1 ms RC, 250 V/m full scale) except for a VHF ``power`` channel
at 25 MHz (a 250 MHz voltage channel would be ~1 GB per 4000 events). Default
class mix: equal shares of the requested classes (``shifted``: 35 % NBE, 20 %
leader steps, 30 % recoil, 15 % EIP). Practice ``every`` keeps at most
``max_per_flash`` (8) events of one class per flash, chosen at random.

Main physical ranges (sources beside each in ``_classes``, from memory):
NBE 25-150 kA, half-cycle ~2-8 us, 200-1000 m at 3e7-1.2e8 m/s, 7-20 km;
EIP 100-400 kA, 10-30 us transit on upward negative leaders at 8-13 km;
leader steps 1-8 kA, ~1 us, 10-50 us apart near the end of a 10-40 ms
descent at 1e5-1e6 m/s; recoil leaders 1e6-2e7 m/s, 2-20 kA pulses a few us
wide; first return strokes ~30 kA median (subsequent ~12 kA) at 1-1.5e8 m/s
with 1.5-2.5 km attenuation; initial breakdown 10-80 kA, 20-40 us, 3-10 per
CG flash; storms 3-250 km away depending on the profile.

Speed (one core of a shared 2-core machine, measured): 20,000 events in
~30 s of CPU for ``plain``, ``shifted``, ``harder`` and ``near``; ~115 s for
``records``, whose dead time and single trigger per record need ~1.3 flashes
per catalogued event.

This is an invented world for testing a research tool; it describes no real
station, storm or observation.
"""

from ._classes import CLASSES, STANDARD
from ._profiles import PROFILES
from ._write import TRUTH_COLUMNS, write_season

__all__ = ["write_season", "PROFILES", "CLASSES", "STANDARD", "TRUTH_COLUMNS"]
