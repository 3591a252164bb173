"""Small test designs shared by the loop, second-stage and compensation tests."""
import freqpair

# An nmos pair with no device capacitances, λ = 0 and an ideal tail: the first
# stage is g_m·R_L/2 at o2 with one pole at o2, so the whole amplifier is the
# textbook two-stage network (R1 = R_L, C1 = C_load + C_in2, R2, C2).
CLEAN_TWO_STAGE = """
name = "test: clean two-stage"
[supply]
positive = 15
negative = -5
[bias]
tail_current = "200 uA"
[pair]
type = "nmos"
mobility_cox = "200 uA/V2"
width = "20 um"
length = "1 um"
threshold = 0.5
lambda = 0
[load]
type = "resistor"
resistance = "100 k"
capacitance = "{c_load}"
[tail]
type = "ideal"
[second_stage]
gm = "5 mS"
output_resistance = "200 k"
input_capacitance = "{c_in}"
load_capacitance = "{c_out}"
miller_capacitance = "{c_c}"
nulling_resistance = "{r_z}"
[feedback]
factor = {beta}
"""


def clean_two_stage(c_load="0.2 pF", c_in="0.05 pF", c_out="10 pF", c_c=0, r_z=0, beta=2e-3):
    return freqpair.design_from_text(CLEAN_TWO_STAGE.format(
        c_load=c_load, c_in=c_in, c_out=c_out, c_c=c_c, r_z=r_z, beta=beta))
