// tune --plot (compiler/plot.cpp): the file is SVG that Python's own XML
// parser (xml.etree.ElementTree, Python 3.11) reads, with one point per
// candidate, the deployed and recommended budgets marked.
#include <gtest/gtest.h>
#include <nlohmann/json.hpp>

#include <filesystem>
#include <string>

#include "test_support.hpp"

using namespace meander::test;

TEST(TunePlot, ValidSvgWithAPointPerCandidate) {
    const std::string sample = std::string(MEANDER_SOURCE_DIR) + "/samples/boiler_ahead/";
    const auto dir = temp_dir("plot");
    const std::string svg = (dir / "tune.svg").string();
    const std::string cmd = std::string(MEANDER_BINARY) + " tune " + sample + "boiler_ahead.mnd --input " + sample +
                            "inputs.csv --method rk4 --method heun --method dormand-prince --max-steps-sweep 32";
    const RunResult r = run(cmd + " --json --plot " + svg);
    ASSERT_EQ(r.status, 0) << r.output;
    const auto j = nlohmann::json::parse(r.output);
    const std::size_t candidates = j["blocks"][0]["candidates"].size();
    ASSERT_GT(candidates, 10u);
    const std::string py = "import xml.etree.ElementTree as ET\n"
                           "root = ET.parse('" + svg + "').getroot()\n"
                           "assert root.tag == '{http://www.w3.org/2000/svg}svg', root.tag\n"
                           "els = list(root.iter())\n"
                           "cls = lambda c: sum(1 for e in els if c in (e.get('class') or '').split())\n"
                           "print(cls('candidate'), cls('deployed'), cls('recommended'), cls('series'))\n";
    write_text(dir / "p.py", py);
    const RunResult p = run(std::string(MEANDER_SCIPY_PYTHON) + " " + (dir / "p.py").string());
    ASSERT_EQ(p.status, 0) << p.output;
    EXPECT_EQ(p.output, std::to_string(candidates) + " 1 1 3\n");
    // A plot that cannot be written is an error, and no half file stays behind.
    const RunResult bad = run(cmd + " --plot " + (dir / "missing" / "x.svg").string());
    EXPECT_EQ(bad.status, 1) << bad.output;
}
