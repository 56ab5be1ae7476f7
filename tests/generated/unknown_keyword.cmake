# Run with cmake -P: meander_generate must stop at a misspelled keyword
# (PRECISON) before it defines anything.
include(${SOURCE_DIR}/cmake/MeanderGenerate.cmake)
meander_generate(bad DESCRIPTION ${SOURCE_DIR}/samples/fan_balance/fan_balance.mnd PRECISON float32)
