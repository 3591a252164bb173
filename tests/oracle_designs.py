"""Small designs for the oracle tests (supply rejection, stage features, noise, loop).

Each exercises some of DESIGN.md §3a/§7; the texts are used by tests/stage_oracle.py
comparisons and, for those without §7 keys, by the comparison with the numbers the
release before the rails printed (tests/data/examples_before_rails.json: do not
edit those designs without regenerating that file from commit 1678e31).
"""
NPN_RES = """
name = "supply: npn resistor load, Norton tail, mismatch"
[supply]
positive = 9
negative = -6
[bias]
tail_current = "1.2 mA"
input_common_mode = 0.3
temperature = 305
[pair]
type = "npn"
beta = 120
early_voltage = 50
vbe = 0.68
base_resistance = 150
cje = "1 pF"
transit_time = "0.3 ns"
cjc0 = "0.7 pF"
ccs = "0.4 pF"

[load]
type = "resistor"
resistance = "5.1 k"
capacitance = "0.8 pF"
[tail]
type = "norton"
resistance = "150 k"
capacitance = "3 pF"
[source]
resistance = "1 k"
[mismatch]
load = 0.03
gm = -0.015
"""

NMOS_MIRROR_DEGEN_TAIL = """
name = "supply: nmos pair, pmos mirror, degenerated nmos tail with body effect"
[supply]
positive = 3.3
negative = -1.2
[bias]
tail_current = "300 uA"
input_common_mode = 0.9
[pair]
type = "nmos"
mobility_cox = "180 uA/V2"
width = "30 um"
length = "0.8 um"
threshold = 0.55
lambda = 0.06
cox = "4.5 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "25 fF"
body_effect = 0.45
surface_potential = 0.75
csb = "30 fF"
noise_gamma = 0.9
flicker_corner = "50 kHz"
[load]
type = "mirror"
capacitance = "0.4 pF"
[load.device]
type = "pmos"
mobility_cox = "70 uA/V2"
width = "40 um"
length = "1 um"
threshold = 0.6
lambda = 0.07
cox = "4.5 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "20 fF"
body_effect = 0.5
csb = "25 fF"
[tail]
type = "degenerated"
degeneration = "1.5 k"
extra_capacitance = "0.3 pF"
[tail.device]
type = "nmos"
mobility_cox = "180 uA/V2"
width = "60 um"
length = "2 um"
threshold = 0.5
lambda = 0.03
cox = "4.5 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "30 fF"
body_effect = 0.4
csb = "35 fF"
[source]
resistance = "2 k"
[mismatch]
load = 0.04
gm = 0.02
"""

# the mirror image of NMOS_MIRROR_DEGEN_TAIL between the rails (DESIGN.md §3a), by hand
PMOS_MIRROR_DEGEN_TAIL = """
name = "supply: the mirror image, written by hand: pmos pair, nmos mirror, degenerated pmos tail"
[supply]
positive = 1.2
negative = -3.3
[bias]
tail_current = "300 uA"
input_common_mode = -0.9
[pair]
type = "pmos"
mobility_cox = "180 uA/V2"
width = "30 um"
length = "0.8 um"
threshold = 0.55
lambda = 0.06
cox = "4.5 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "25 fF"
body_effect = 0.45
surface_potential = 0.75
csb = "30 fF"
noise_gamma = 0.9
flicker_corner = "50 kHz"
[load]
type = "mirror"
capacitance = "0.4 pF"
[load.device]
type = "nmos"
mobility_cox = "70 uA/V2"
width = "40 um"
length = "1 um"
threshold = 0.6
lambda = 0.07
cox = "4.5 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "20 fF"
body_effect = 0.5
csb = "25 fF"
[tail]
type = "degenerated"
degeneration = "1.5 k"
extra_capacitance = "0.3 pF"
[tail.device]
type = "pmos"
mobility_cox = "180 uA/V2"
width = "60 um"
length = "2 um"
threshold = 0.5
lambda = 0.03
cox = "4.5 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "30 fF"
body_effect = 0.4
csb = "35 fF"
[source]
resistance = "2 k"
[mismatch]
load = 0.04
gm = 0.02
"""

NPN_TWO_STAGE = """
name = "supply: npn mirror-loaded pair, simple-mirror tail, second stage with nulling resistor"
[supply]
positive = 6
negative = -6
[bias]
tail_current = "100 uA"
input_common_mode = 0.5
[pair]
type = "npn"
beta = 150
early_voltage = 60
base_resistance = 200
cje = "0.4 pF"
transit_time = "0.4 ns"
cjc0 = "0.3 pF"
ccs = "0.2 pF"
[load]
type = "mirror"
capacitance = "0.3 pF"
[load.device]
type = "pnp"
beta = 60
early_voltage = 40
base_resistance = 100
cje = "0.5 pF"
transit_time = "1 ns"
cjc0 = "0.4 pF"
ccs = "0.6 pF"
[tail]
type = "mirror"
extra_capacitance = "1 pF"
[tail.device]
type = "npn"
beta = 100
early_voltage = 70
cjc0 = "0.3 pF"
ccs = "0.5 pF"
cje = "0.5 pF"
[second_stage]
gm = "6 mS"
output_resistance = "120 k"
input_capacitance = "0.8 pF"
load_capacitance = "15 pF"
miller_capacitance = "6 pF"
nulling_resistance = "300"
[source]
resistance = "500"
[mismatch]
load = 0.02
gm = 0.01
"""

NPN_RES_TWO_STAGE = """
name = "supply: npn resistor-loaded pair with a second stage"
[supply]
positive = 10
negative = -10
[bias]
tail_current = "500 uA"
[pair]
type = "npn"
beta = 100
early_voltage = 80
cje = "0.5 pF"
ft = "600 MHz"
cjc0 = "0.4 pF"
ccs = "0.3 pF"
[load]
type = "resistor"
resistance = "20 k"
capacitance = "0.2 pF"
[tail]
type = "norton"
resistance = "400 k"
capacitance = "2 pF"
[second_stage]
gm = "3 mS"
output_resistance = "200 k"
input_capacitance = "0.5 pF"
load_capacitance = "5 pF"
miller_capacitance = "2 pF"
[mismatch]
load = -0.03
"""

NPN_DEGEN_CASCODE = """
name = "stage7: npn pair, degeneration, cascode, r_b, added elements"
[supply]
positive = 12
negative = -8
[bias]
tail_current = "1 mA"
input_common_mode = 0.2
[pair]
type = "npn"
beta = 90
early_voltage = 40
vbe = 0.7
base_resistance = 120
degeneration = "470"
cje = "1.2 pF"
transit_time = "0.25 ns"
cjc0 = "0.8 pF"
ccs = "0.5 pF"
[pair.cascode]
bias = 4.0
beta = 110
early_voltage = 60
vbe = 0.72
cje = "0.8 pF"
transit_time = "0.3 ns"
cjc0 = "0.6 pF"
ccs = "0.4 pF"
[load]
type = "resistor"
resistance = "6.8 k"
capacitance = "0.5 pF"
[tail]
type = "norton"
resistance = "300 k"
capacitance = "2.5 pF"
[source]
resistance = "600"
[mismatch]
load = 0.02
gm = 0.03
[[element]]
kind = "capacitor"
nodes = ["t", "ground"]
value = "150 fF"
name = "tail wiring"
[[element]]
kind = "resistor"
nodes = ["e1", "e2"]
value = "20 k"
name = "emitter link"
[[element]]
kind = "transconductance"
nodes = ["o2", "vneg"]
value = "20 uS"
control = ["c1", "ground"]
name = "leak"
[[element]]
kind = "capacitor"
nodes = ["b1", "o2"]
value = "30 fF"
"""

NMOS_BODY_CASCODE = """
name = "stage7: nmos pair, body effect, C_sb, degeneration, cascode"
[supply]
positive = 5
negative = -1
[bias]
tail_current = "400 uA"
input_common_mode = 1.5
[pair]
type = "nmos"
mobility_cox = "200 uA/V2"
width = "40 um"
length = "1 um"
threshold = 0.6
lambda = 0.05
cox = "4.6 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "30 fF"
body_effect = 0.5
surface_potential = 0.8
csb = "40 fF"
degeneration = "800"
[pair.cascode]
bias = 3.2
mobility_cox = "200 uA/V2"
width = "40 um"
length = "0.5 um"
threshold = 0.6
lambda = 0.08
cox = "4.6 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "25 fF"
body_effect = 0.5
surface_potential = 0.8
csb = "20 fF"
[load]
type = "resistor"
resistance = "8 k"
capacitance = "0.3 pF"
[tail]
type = "norton"
resistance = "100 k"
capacitance = "1 pF"
[source]
resistance = "1 k"
[mismatch]
load = -0.02
gm = 0.04
[[element]]
kind = "transconductance"
nodes = ["o1", "o2"]
value = "10 uS"
control = ["c2", "t"]
[[element]]
kind = "capacitor"
nodes = ["vpos", "t"]
value = "50 fF"
name = "rail coupling"
[[element]]
kind = "resistor"
nodes = ["o1", "vneg"]
value = "2 M"
name = "leak"
"""

PNP_RES = """
name = "supply: pnp resistor load, Norton tail (mirror of an npn stage)"
[supply]
positive = 6
negative = -9
[bias]
tail_current = "1.2 mA"
input_common_mode = -0.3
temperature = 305
[pair]
type = "pnp"
beta = 120
early_voltage = 50
vbe = 0.68
base_resistance = 150
cje = "1 pF"
transit_time = "0.3 ns"
cjc0 = "0.7 pF"
ccs = "0.4 pF"
[load]
type = "resistor"
resistance = "5.1 k"
capacitance = "0.8 pF"
[tail]
type = "norton"
resistance = "150 k"
capacitance = "3 pF"
[source]
resistance = "1 k"
[mismatch]
load = 0.03
gm = -0.015
"""

PMOS_MIRROR_CASCODE_TAIL = """
name = "supply: pmos pair, nmos mirror, pmos cascode tail, body effect everywhere"
[supply]
positive = 2.5
negative = -2.5
[bias]
tail_current = "200 uA"
input_common_mode = -0.5
[pair]
type = "pmos"
mobility_cox = "70 uA/V2"
width = "60 um"
length = "1 um"
threshold = 0.6
lambda = 0.05
cox = "4.6 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "30 fF"
body_effect = 0.4
csb = "30 fF"
[load]
type = "mirror"
capacitance = "0.5 pF"
[load.device]
type = "nmos"
mobility_cox = "200 uA/V2"
width = "20 um"
length = "1 um"
threshold = 0.5
lambda = 0.06
cox = "4.6 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "20 fF"
[tail]
type = "cascode"
extra_capacitance = "0.2 pF"
[tail.device]
type = "pmos"
mobility_cox = "70 uA/V2"
width = "120 um"
length = "2 um"
threshold = 0.6
lambda = 0.03
cox = "4.6 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "40 fF"
body_effect = 0.45
csb = "30 fF"
[source]
resistance = "1 k"
[mismatch]
load = 0.03
gm = -0.02
"""

PNP_MIRROR_TWO_STAGE = """
name = "supply: pnp pair, npn mirror, degenerated pnp tail, second stage on the negative rail"
[supply]
positive = 5
negative = -5
[bias]
tail_current = "80 uA"
input_common_mode = 0
[pair]
type = "pnp"
beta = 80
early_voltage = 50
cje = "0.4 pF"
transit_time = "0.5 ns"
cjc0 = "0.3 pF"
ccs = "0.3 pF"
[load]
type = "mirror"
capacitance = "0.5 pF"
[load.device]
type = "npn"
beta = 150
early_voltage = 70
cje = "0.3 pF"
transit_time = "0.3 ns"
cjc0 = "0.3 pF"
ccs = "0.4 pF"
[tail]
type = "degenerated"
degeneration = "5 k"
extra_capacitance = "0.5 pF"
[tail.device]
type = "pnp"
beta = 70
early_voltage = 45
cje = "0.4 pF"
cjc0 = "0.3 pF"
ccs = "0.6 pF"
base_resistance = 200
[second_stage]
gm = "4 mS"
output_resistance = "150 k"
input_capacitance = "0.5 pF"
load_capacitance = "10 pF"
miller_capacitance = "3 pF"
nulling_resistance = "1 k"
[source]
resistance = "2 k"
[mismatch]
load = -0.02
gm = 0.01
"""
# pnp/pmos cascoded pairs: the cascode node at bias + V_EB (+ V_SG) (§3a, §7c)
PNP_CASC = """
name = "pnp cascoded, degenerated pair, npn mirror load, r_b on cascode"
[supply]
positive = 8
negative = -8
[bias]
tail_current = "400 uA"
input_common_mode = 1.0
[pair]
type = "pnp"
beta = 80
early_voltage = 40
base_resistance = 120
degeneration = "300"
cje = "0.8 pF"
transit_time = "0.5 ns"
cjc0 = "0.6 pF"
ccs = "0.5 pF"
flicker_corner = "1 kHz"
[pair.cascode]
bias = -2.0
beta = 60
early_voltage = 30
base_resistance = 250
cje = "0.5 pF"
ft = "300 MHz"
cjc0 = "0.4 pF"
ccs = "0.3 pF"
flicker_corner = "300"
[load]
type = "mirror"
capacitance = "0.7 pF"
[load.device]
type = "npn"
beta = 150
early_voltage = 80
base_resistance = 80
cje = "0.4 pF"
transit_time = "0.3 ns"
cjc0 = "0.3 pF"
ccs = "0.4 pF"
[tail]
type = "cascode"
extra_capacitance = "0.3 pF"
[tail.device]
type = "pnp"
beta = 70
early_voltage = 50
base_resistance = 50
cje = "0.5 pF"
cjc0 = "0.4 pF"
ccs = "0.6 pF"
flicker_corner = "2 kHz"
[source]
resistance = "800"
[mismatch]
load = 0.02
gm = -0.03
"""
PMOS_CASC = """
name = "pmos cascoded degenerated pair, resistor load, second stage"
[supply]
positive = 3
negative = -3
[bias]
tail_current = "300 uA"
input_common_mode = 0.5
[pair]
type = "pmos"
mobility_cox = "80 uA/V2"
width = "50 um"
length = "1 um"
threshold = 0.6
lambda = 0.05
cox = "4.6 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "30 fF"
body_effect = 0.4
csb = "30 fF"
degeneration = "500"
flicker_corner = "20 kHz"
noise_gamma = 1.0
[pair.cascode]
bias = -1.0
mobility_cox = "80 uA/V2"
width = "50 um"
length = "0.5 um"
threshold = 0.6
lambda = 0.08
cox = "4.6 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "20 fF"
body_effect = 0.4
csb = "20 fF"
[load]
type = "resistor"
resistance = "5 k"
capacitance = "0.3 pF"
[tail]
type = "degenerated"
degeneration = "1 k"
extra_capacitance = "0.2 pF"
[tail.device]
type = "pmos"
mobility_cox = "80 uA/V2"
width = "100 um"
length = "2 um"
threshold = 0.6
lambda = 0.03
cox = "4.6 mF/m2"
overlap_cap = "0.3 nF/m"
cdb = "40 fF"
body_effect = 0.5
csb = "40 fF"
flicker_corner = "5 kHz"
[second_stage]
gm = "2 mS"
output_resistance = "300 k"
input_capacitance = "0.2 pF"
load_capacitance = "3 pF"
miller_capacitance = "1.5 pF"
nulling_resistance = "2 k"
[source]
resistance = "300"
[mismatch]
load = -0.04
gm = 0.02
"""

ALL = dict(NPN_RES=NPN_RES, PMOS_MIRROR_DEGEN_TAIL=PMOS_MIRROR_DEGEN_TAIL, NMOS_MIRROR_DEGEN_TAIL=NMOS_MIRROR_DEGEN_TAIL, NPN_TWO_STAGE=NPN_TWO_STAGE,
           NPN_RES_TWO_STAGE=NPN_RES_TWO_STAGE, NPN_DEGEN_CASCODE=NPN_DEGEN_CASCODE,
           NMOS_BODY_CASCODE=NMOS_BODY_CASCODE, PNP_RES=PNP_RES, PMOS_MIRROR_CASCODE_TAIL=PMOS_MIRROR_CASCODE_TAIL,
           PNP_MIRROR_TWO_STAGE=PNP_MIRROR_TWO_STAGE,
           PNP_CASC=PNP_CASC, PMOS_CASC=PMOS_CASC)
