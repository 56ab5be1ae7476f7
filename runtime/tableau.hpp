// The one table of Butcher tableaux. The reference integrator reads it and
// the emitter prints its coefficients from it, so the two cannot disagree.
#pragma once

#include <string_view>
#include <vector>

namespace meander {

// A coefficient as written in its source (exact fraction "19372/6561",
// integer, or a long decimal for methods published that way) and its value
// correctly rounded to double.
struct Coefficient {
    std::string_view text;
    double value = 0.0;
};

struct Tableau {
    std::string_view key;           // name in descriptions: "dormand-prince"
    std::string_view title;         // "Dormand-Prince 5(4)"
    std::string_view source;        // publication the coefficients come from
    int order = 0;                  // order of the propagated solution
    int embedded_order = 0;         // order of the embedded solution; 0 for fixed-step methods
    int stages = 0;
    bool fsal = false;              // last stage is f(t + h, y_new)
    std::vector<Coefficient> c;     // stages
    std::vector<Coefficient> a;     // strictly lower triangle, row by row: a[i][j], j < i
    std::vector<Coefficient> b;     // weights of the propagated solution
    std::vector<Coefficient> e;     // error weights b - b_hat (empty for fixed-step methods)
    std::vector<Coefficient> bhat;  // weights of the embedded solution (empty for fixed-step)

    bool adaptive() const { return embedded_order > 0; }
    // a[i][j] for j < i
    double a_at(int i, int j) const { return a[static_cast<std::size_t>(i * (i - 1) / 2 + j)].value; }
    const Coefficient& a_coef(int i, int j) const { return a[static_cast<std::size_t>(i * (i - 1) / 2 + j)]; }
};

const std::vector<Tableau>& tableaux();
const Tableau* find_tableau(std::string_view key);  // nullptr when unknown

}  // namespace meander
