#!/usr/bin/env bash
# Writes the fuzz harnesses' seed corpora and dictionaries (committed; run
# again when the samples, the malformed-input tables or the grammar change):
#   tests/fuzz/make_corpus.sh [BUILD_DIR]     (default: build)
# Seeds: the samples' descriptions and weights, the test data files, and every
# input the malformed-input tables of tests/unit (bad_descriptions,
# stream_language, bad_weights, framework_weights) feed to a reader, which those
# programs write when MEANDER_FUZZ_SEEDS is set. Files over 64 KiB are left out.
set -euo pipefail
cd "$(dirname "$0")/../.."
build=${1:-build}
out=tests/fuzz/corpus
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT

for t in bad_descriptions stream_language bad_weights framework_weights; do
  MEANDER_FUZZ_SEEDS="$tmp" "$build/tests/test_$t" --gtest_brief=1 >/dev/null
done
mkdir -p "$tmp/description" "$tmp/weights"
cp samples/*/*.mnd "$tmp/description/"
find samples tests/data/weights tests/data/frameworks -type f \
  \( -name '*.npz' -o -name '*.npy' -o -name '*.mnw' -o -name '*.pt' -o -name '*.safetensors' \) \
  -size -65k -exec cp {} "$tmp/weights/" \;

# Named by content, so running this again adds only what is new.
for kind in description weights; do
  mkdir -p "$out/$kind"
  for f in "$tmp/$kind"/*; do
    cp "$f" "$out/$kind/$(sha1sum "$f" | cut -c1-16)"
  done
done

# Dictionaries: the grammar's keywords and the solver methods; the formats' magic bytes and keys.
{
  echo '# Keywords of grammar/meander.hpp and methods of runtime/tableau.cpp (tests/fuzz/make_corpus.sh).'
  grep -o 'TAO_PEGTL_STRING( "[^"]*" )' grammar/meander.hpp | sed 's/TAO_PEGTL_STRING( //; s/ )//' | sort -u
  grep -o 'm.key = "[^"]*"' runtime/tableau.cpp | sed 's/m.key = //' | sort -u
  printf '"%s"\n' '->' '+ t' '{' '}' '[' ']' ':' ',' '#' '\"' '\\' '\\n' 't in [0, 1]' 't in [0, gap]' '1e-6' '-inf' 'nan'
} > tests/fuzz/description.dict
cat > tests/fuzz/weights.dict <<'DICT'
# Magic bytes and keys of the weights formats (tests/fuzz/make_corpus.sh).
# .npy (NEP 1)
"\x93NUMPY"
"\x01\x00"
"\x02\x00"
"\x03\x00"
"'descr'"
"'fortran_order'"
"'shape'"
"'<f4'"
"'>f8'"
"'|f4'"
"False"
"True"
# zip (APPNOTE): local header, central directory, end of central directory, deflate
"PK\x03\x04"
"PK\x01\x02"
"PK\x05\x06"
"\x08\x00"
".npy"
"archive/data.pkl"
"archive/data/0"
"archive/byteorder"
# pickle opcodes and the globals the restricted unpickler allows
"\x80\x02"
"\x80\x04"
"\x95"
"}q\x00("
"ctorch._utils\x0a_rebuild_tensor_v2\x0a"
"ccollections\x0aOrderedDict\x0a"
"ctorch\x0aFloatStorage\x0a"
"storage"
"R"
"b"
"."
# safetensors
"__metadata__"
"\"dtype\""
"\"shape\""
"\"data_offsets\""
"\"F32\""
"\"BF16\""
"\"I8\""
# weight listing
"meander-weights 1"
"tensor "
"float32"
"float64"
DICT
echo "corpus: $(ls "$out/description" | wc -l) descriptions, $(ls "$out/weights" | wc -l) weights files"
