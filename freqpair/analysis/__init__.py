"""The analysis layer: what one network says.

Named responses, crossings (f_3dB, UGF, corners) found by root-finding,
exact poles and zeros and the elements that set them, hand estimates beside
the exact values, the feedback loop and its compensation, the result object
of :func:`freqpair.analysis.result.analyze` and its words (the summary).
It imports the circuit and design layers only.
"""
