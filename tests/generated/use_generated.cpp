// Runs the library that meander_generate built from samples/fan_balance and
// compares it with expected.csv, which the sample's trainer computed with its
// own float64 NumPy forward pass (samples/fan_balance/train.py).
#include <cmath>
#include <cstdio>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "fan_balance.hpp"
#include "fan_balance_selftest.hpp"  // SELF_TEST in meander_generate

static std::vector<std::vector<double>> rows(const std::string& path) {
    std::ifstream in(path);
    std::vector<std::vector<double>> out;
    std::string line;
    std::getline(in, line);  // header
    while (std::getline(in, line)) {
        if (line.empty()) continue;
        std::vector<double> r;
        std::stringstream ss(line);
        std::string f;
        while (std::getline(ss, f, ',')) r.push_back(std::stod(f));
        out.push_back(r);
    }
    return out;
}

int main() {
    const std::string dir = std::string(MEANDER_SOURCE_DIR) + "/samples/fan_balance/";
    auto inputs = rows(dir + "inputs.csv");
    auto expected = rows(dir + "expected.csv");
    if (inputs.empty() || inputs.size() != expected.size()) return 1;
    static fan_balance::context ctx;
    int failures = 0;
    double worst = 0;
    for (std::size_t r = 0; r < inputs.size(); ++r) {
        float in[fan_balance::input_size];
        float out[fan_balance::output_size];
        for (std::size_t i = 0; i < fan_balance::input_size; ++i) in[i] = static_cast<float>(inputs[r][i]);
        if (fan_balance::infer(ctx, in, out) != fan_balance::result::ok) ++failures;
        for (std::size_t i = 0; i < fan_balance::output_size; ++i) {
            double d = std::fabs(static_cast<double>(out[i]) - expected[r][i]);
            worst = d > worst ? d : worst;
            if (d > 1e-4 * std::fmax(1.0, std::fabs(expected[r][i]))) ++failures;  // verify's float32 tolerance
        }
    }
    std::printf("%zu rows, largest deviation %.3g, %d failures\n", inputs.size(), worst, failures);
    // The self-test the helper emitted holds the same 40 rows with eval's outputs.
    const fan_balance::self_test_report st = fan_balance::self_test(ctx, 1e-4f);
    std::printf("self-test: %u vectors, %u failures\n", st.vectors_run, st.failures);
    if (st.vectors_run != inputs.size() || st.failures != 0 || !st.build_conditions_hold) ++failures;
    return failures == 0 ? 0 : 1;
}
