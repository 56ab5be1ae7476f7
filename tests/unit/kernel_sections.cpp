// The kernel sections' "needs" lines (runtime/math_float.inc and
// runtime/math_lanes.inc) name exactly the sections each body calls. The
// emitter copies a section with what it needs, so a need too many puts an
// unused function in the emitted file (clang's -Wunused-function under
// -Werror then refuses it) and a need too few leaves a call undefined. The
// bodies are read here as plain text, apart from the emitter's own reader.
#include <gtest/gtest.h>

#include <fstream>
#include <map>
#include <regex>
#include <set>
#include <sstream>
#include <string>
#include <vector>

namespace {

struct Section {
    std::string file;
    std::string name;
    std::set<std::string> needs;
    std::string body;
};

std::vector<Section> read_sections(const std::string& file) {
    std::ifstream in(std::string(MEANDER_SOURCE_DIR) + "/runtime/" + file);
    EXPECT_TRUE(in) << file;
    std::vector<Section> out;
    const std::regex head(R"(^// kernel ([a-z0-9_]+): needs(.*)$)");
    for (std::string line; std::getline(in, line);) {
        std::smatch m;
        if (std::regex_match(line, m, head)) {
            Section s{file, m[1], {}, {}};
            std::istringstream names(m[2].str());
            for (std::string n; names >> n;) s.needs.insert(n);
            out.push_back(s);
        } else if (line.rfind("// end of kernels", 0) == 0) {
            break;
        } else if (!out.empty()) {
            // Comments are not calls.
            const std::size_t c = line.find("//");
            out.back().body += (c == std::string::npos ? line : line.substr(0, c)) + "\n";
        }
    }
    return out;
}

// Identifiers a body uses, other than the ones it declares itself.
std::set<std::string> identifiers(const std::string& body) {
    std::set<std::string> out;
    const std::regex word(R"([A-Za-z_][A-Za-z0-9_]*)");
    for (auto it = std::sregex_iterator(body.begin(), body.end(), word); it != std::sregex_iterator(); ++it)
        out.insert(it->str());
    return out;
}

// What a section's own declarations are named: the first identifier before
// "(" of an inline function or the name of a constexpr table.
std::set<std::string> declared(const std::string& body) {
    std::set<std::string> out;
    const std::regex fn(R"((?:inline|constexpr)[^(=;{]*?\b([A-Za-z_][A-Za-z0-9_]*)\s*[\[(])");
    for (auto it = std::sregex_iterator(body.begin(), body.end(), fn); it != std::sregex_iterator(); ++it)
        out.insert((*it)[1].str());
    return out;
}

TEST(KernelSections, NeedsNameExactlyWhatEachBodyCalls) {
    std::vector<Section> all = read_sections("math_float.inc");
    const std::vector<Section> lanes = read_sections("math_lanes.inc");
    ASSERT_GE(all.size(), 15u);
    ASSERT_GE(lanes.size(), 5u);
    all.insert(all.end(), lanes.begin(), lanes.end());

    // What each section declares (a section may hold a helper and a table
    // beside its kernel: a call to any of them is a call to the section).
    std::map<std::string, std::string> owner;
    for (const Section& s : all)
        for (const std::string& d : declared(s.body)) owner.emplace(d, s.name);

    std::set<std::string> names;
    for (const Section& s : all) names.insert(s.name);
    for (const Section& s : all) {
        const std::set<std::string> mine = declared(s.body);
        std::set<std::string> calls;
        for (const std::string& id : identifiers(s.body)) {
            const auto o = owner.find(id);
            if (o != owner.end() && o->second != s.name && !mine.count(id)) calls.insert(o->second);
        }
        for (const std::string& n : s.needs) {
            EXPECT_TRUE(names.count(n)) << s.file << ": kernel " << s.name << " needs " << n << ", no such section";
            EXPECT_TRUE(calls.count(n)) << s.file << ": kernel " << s.name << " needs " << n
                                        << " but its body does not call it";
        }
        for (const std::string& c : calls)
            EXPECT_TRUE(s.needs.count(c)) << s.file << ": kernel " << s.name << " calls into " << c
                                          << " but does not name it in its needs line";
    }
}

}  // namespace
