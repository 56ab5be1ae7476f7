# meander_generate(TARGET name DESCRIPTION file.mnd [OUTPUT_DIR dir] [PRECISION float32|float64])
# Regenerates the emitted C++ whenever the description, its weights or the
# meander binary change, and adds the result to an object library `name`.
# (Filled in by the build-integration work.)
