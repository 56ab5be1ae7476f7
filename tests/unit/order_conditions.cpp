// The table of Butcher tableaux checked against the Runge-Kutta theory it
// claims, in exact rational arithmetic on the coefficient texts:
// - the order conditions of every rooted tree up to the method's order
//   (HNW I, II.2, Theorem 2.13; Butcher, Numerical Methods for Ordinary
//   Differential Equations, ch. 3),
//   and failure of at least one condition one order higher;
// - the same for the embedded solution and its order;
// - rows of A sum to c, e = b - b_hat, FSAL methods' last row of A equals b;
// - each stored double is the correctly rounded value of its text;
// - stability polynomial coefficients b^T A^(k-1) 1 (HNW II, IV.2) against the
//   values in the project's reference sheet.
// Methods published as decimals (Tsitouras) satisfy the conditions only to the
// digits given; they are checked against a stated tolerance instead.

#include <gtest/gtest.h>

#include <boost/multiprecision/cpp_int.hpp>
#include <boost/rational.hpp>
#include <cmath>
#include <cstdlib>
#include <fmt/format.h>
#include <functional>
#include <iterator>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "runtime/integrate.hpp"
#include "runtime/tableau.hpp"

namespace {

namespace mp = boost::multiprecision;
// Expression templates off: boost::rational needs plain value semantics.
using Int = mp::number<mp::cpp_int_backend<>, mp::et_off>;
using Q = boost::rational<Int>;

using meander::Coefficient;
using meander::Tableau;

// ---- exact values of texts and doubles -------------------------------------

Int pow10(int n) {
    Int r = 1;
    for (int i = 0; i < n; ++i) r *= 10;
    return r;
}

bool all_digits(std::string_view s) {
    if (s.empty()) return false;
    for (char ch : s)
        if (ch < '0' || ch > '9') return false;
    return true;
}

// cpp_int reads a leading 0 as octal: strip them.
Int decimal_int(std::string_view digits) {
    while (digits.size() > 1 && digits[0] == '0') digits.remove_prefix(1);
    return Int{std::string(digits)};
}

// "-19372/6561", "8", "0.0964607668180652", "1.5e-3": the exact rational written.
std::optional<Q> parse_exact(std::string_view s) {
    bool neg = false;
    if (!s.empty() && (s[0] == '-' || s[0] == '+')) {
        neg = s[0] == '-';
        s.remove_prefix(1);
    }
    Q r;
    if (auto slash = s.find('/'); slash != std::string_view::npos) {
        std::string_view num = s.substr(0, slash), den = s.substr(slash + 1);
        if (!all_digits(num) || !all_digits(den)) return std::nullopt;
        Int d = decimal_int(den);
        if (d == 0) return std::nullopt;
        r = Q(decimal_int(num), d);
    } else {
        int exp10 = 0;
        if (auto e = s.find_first_of("eE"); e != std::string_view::npos) {
            std::string_view ex = s.substr(e + 1);
            bool eneg = !ex.empty() && ex[0] == '-';
            if (!ex.empty() && (ex[0] == '-' || ex[0] == '+')) ex.remove_prefix(1);
            if (!all_digits(ex) || ex.size() > 4) return std::nullopt;
            exp10 = std::atoi(std::string(ex).c_str()) * (eneg ? -1 : 1);
            s = s.substr(0, e);
        }
        std::string digits;
        if (auto dot = s.find('.'); dot != std::string_view::npos) {
            std::string_view ip = s.substr(0, dot), fp = s.substr(dot + 1);
            if ((!ip.empty() && !all_digits(ip)) || (!fp.empty() && !all_digits(fp)) || ip.size() + fp.size() == 0)
                return std::nullopt;
            digits = std::string(ip) + std::string(fp);
            exp10 -= static_cast<int>(fp.size());
        } else {
            if (!all_digits(s)) return std::nullopt;
            digits = std::string(s);
        }
        Int m = decimal_int(digits);
        r = exp10 >= 0 ? Q(m * pow10(exp10)) : Q(m, pow10(-exp10));
    }
    return neg ? -r : r;
}

bool is_decimal(std::string_view s) { return s.find_first_of(".eE") != std::string_view::npos; }

// The exact value of a finite double: mantissa * 2^exponent.
Q exact_of(double v) {
    int e = 0;
    double m = std::frexp(v, &e);
    auto mi = static_cast<long long>(std::ldexp(m, 53));
    e -= 53;
    Int num = mi, den = 1;
    if (e > 0) num <<= e; else den <<= -e;
    return Q(num, den);
}

Q qabs(const Q& q) { return q < 0 ? -q : q; }

// No double lies nearer to r than v (ties are not told apart: none occur here).
bool correctly_rounded(const Q& r, double v) {
    if (!std::isfinite(v)) return false;
    Q d = qabs(r - exact_of(v));
    return d <= qabs(r - exact_of(std::nextafter(v, -HUGE_VAL))) &&
           d <= qabs(r - exact_of(std::nextafter(v, HUGE_VAL)));
}

long double to_ld(const Q& q) {
    // Each part rounded to 64 bits (they stay below 1e300 here): fine for
    // residual magnitudes; exactness is kept in Q.
    return q.numerator().convert_to<long double>() / q.denominator().convert_to<long double>();
}

// ---- rooted trees ------------------------------------------------------------

// A rooted tree as the multiset of its root's subtrees (indices of earlier trees).
struct Tree {
    int order = 1;
    std::vector<std::size_t> children;
    Int gamma = 1;  // density gamma(t) = |t| * prod gamma(children)
};

// Every rooted tree up to max_order, by order; each once (children chosen as a
// non-decreasing index sequence, so every multiset appears exactly once).
std::vector<Tree> rooted_trees(int max_order) {
    std::vector<Tree> trees{Tree{}};
    for (int n = 2; n <= max_order; ++n) {
        const std::size_t known = trees.size();  // all trees of order < n
        std::vector<std::size_t> pick;
        std::function<void(std::size_t, int)> choose = [&](std::size_t from, int remaining) {
            if (remaining == 0) {
                Tree t;
                t.order = n;
                t.children = pick;
                t.gamma = n;
                for (std::size_t ch : pick) t.gamma *= trees[ch].gamma;
                trees.push_back(t);
                return;
            }
            for (std::size_t i = from; i < known; ++i) {
                if (trees[i].order > remaining) continue;
                pick.push_back(i);
                choose(i, remaining - trees[i].order);
                pick.pop_back();
            }
        };
        choose(0, n - 1);
    }
    return trees;
}

// ---- a tableau in a chosen arithmetic -------------------------------------------

template <class T>
struct Coeffs {
    int s = 0;
    std::vector<T> c, b, bhat, e;
    std::vector<std::vector<T>> A;  // full s x s, zero on and above the diagonal
};

template <class T, class Conv>
Coeffs<T> coeffs_of(const Tableau& tab, Conv conv) {
    Coeffs<T> k;
    k.s = tab.stages;
    for (const auto& x : tab.c) k.c.push_back(conv(x));
    for (const auto& x : tab.b) k.b.push_back(conv(x));
    for (const auto& x : tab.bhat) k.bhat.push_back(conv(x));
    for (const auto& x : tab.e) k.e.push_back(conv(x));
    k.A.assign(static_cast<std::size_t>(k.s), std::vector<T>(static_cast<std::size_t>(k.s), T(0)));
    for (int i = 1; i < k.s; ++i)
        for (int j = 0; j < i; ++j) k.A[static_cast<std::size_t>(i)][static_cast<std::size_t>(j)] = conv(tab.a_coef(i, j));
    return k;
}

// Stage vectors Phi_i(t) of every tree: leaf 1, [t1..tm] -> prod_k (A Phi(t_k))_i.
template <class T>
std::vector<std::vector<T>> stage_weights(const Coeffs<T>& k, const std::vector<Tree>& trees) {
    const auto s = static_cast<std::size_t>(k.s);
    std::vector<std::vector<T>> phi;
    std::vector<std::vector<T>> a_phi;  // A * Phi(t) for each tree, reused by parents
    for (const Tree& t : trees) {
        std::vector<T> v(s, T(1));
        for (std::size_t ch : t.children)
            for (std::size_t i = 0; i < s; ++i) v[i] *= a_phi[ch][i];
        std::vector<T> av(s, T(0));
        for (std::size_t i = 0; i < s; ++i)
            for (std::size_t j = 0; j < i; ++j) av[i] += k.A[i][j] * v[j];
        phi.push_back(v);
        a_phi.push_back(av);
    }
    return phi;
}

template <class T>
T dot(const std::vector<T>& w, const std::vector<T>& v) {
    T r(0);
    for (std::size_t i = 0; i < w.size(); ++i) r += w[i] * v[i];
    return r;
}

constexpr int kMaxTreeOrder = 6;  // one beyond the highest order in the table

const std::vector<Tree>& trees() {
    static const std::vector<Tree> t = rooted_trees(kMaxTreeOrder);
    return t;
}

// Residual b.Phi(t) - 1/gamma(t) of every tree, exactly.
std::vector<Q> residuals(const std::vector<Q>& w, const std::vector<std::vector<Q>>& phi) {
    std::vector<Q> r;
    for (std::size_t n = 0; n < trees().size(); ++n) r.push_back(dot(w, phi[n]) - Q(Int(1), trees()[n].gamma));
    return r;
}

bool exact_method(const Tableau& tab) {
    auto all = [](const std::vector<Coefficient>& v) {
        for (const auto& x : v)
            if (is_decimal(x.text)) return false;
        return true;
    };
    return all(tab.c) && all(tab.a) && all(tab.b) && all(tab.bhat) && all(tab.e);
}

// Tolerance for methods published as decimals, on the exact value of the text.
// runtime/tableau.cpp writes Tsitouras (2011, printed to 16 digits) to 40
// digits, which meet the conditions to ~1e-39; 1e-30 leaves room for the
// rounding of those digits times the coefficient sizes (|a_ij| < 13).
constexpr double kDecimalTol = 1e-30;
constexpr double kBeyondOrder = 1e-8;  // a condition of order p+1 "fails" if off by more

std::string tree_name(std::size_t n) {
    std::string out;
    std::function<void(std::size_t)> rec = [&](std::size_t i) {
        out += "[";
        for (std::size_t ch : trees()[i].children) rec(ch);
        out += "]";
    };
    rec(n);
    return out;
}

// Order conditions of weights `w` (b or b_hat) up to `order`; returns the failures.
void check_weights(const std::string& what, const std::vector<Q>& w, const std::vector<std::vector<Q>>& phi,
                   int order, bool exact, std::vector<std::string>& fails) {
    std::vector<Q> r = residuals(w, phi);
    bool beyond_fails = false;
    for (std::size_t n = 0; n < trees().size(); ++n) {
        int o = trees()[n].order;
        long double rl = std::fabs(to_ld(r[n]));
        if (o <= order) {
            bool ok = exact ? r[n] == 0 : rl <= kDecimalTol;
            if (!ok)
                fails.push_back(fmt::format("{}: order condition of tree {} (order {}) off by {}", what, tree_name(n), o,
                                            static_cast<double>(rl)));
        } else if (o == order + 1 && (exact ? r[n] != 0 : rl > kBeyondOrder)) {
            beyond_fails = true;
        }
    }
    if (order + 1 <= kMaxTreeOrder && !beyond_fails)
        fails.push_back(fmt::format("{}: satisfies every condition of order {} too: its order is understated", what, order + 1));
}

// Every structural and order property of one tableau; an empty list means it holds.
std::vector<std::string> tableau_failures(const Tableau& tab) {
    std::vector<std::string> fails;
    const auto s = static_cast<std::size_t>(tab.stages);
    if (tab.c.size() != s || tab.b.size() != s || tab.a.size() != s * (s - 1) / 2) {
        fails.push_back("sizes of c, b, a do not match the stage count");
        return fails;
    }
    if (tab.adaptive() && (tab.bhat.size() != s || tab.e.size() != s)) {
        fails.push_back("adaptive method without b_hat and e of stage count size");
        return fails;
    }
    if (!tab.adaptive() && (!tab.bhat.empty() || !tab.e.empty())) fails.push_back("fixed-step method with error weights");

    // Texts parse, and each stored double is the correctly rounded text.
    auto check_text = [&](const Coefficient& x) -> Q {
        auto q = parse_exact(x.text);
        if (!q) {
            fails.push_back(fmt::format("coefficient text '{}' is not a fraction, integer or decimal", x.text));
            return Q(0);
        }
        if (!correctly_rounded(*q, x.value))
            fails.push_back(fmt::format("coefficient '{}' stored as {} is not its correctly rounded double", x.text, x.value));
        // Decimal texts: the C library's reading (glibc strtod rounds correctly) gives the stored double.
        if (is_decimal(x.text) && std::strtod(std::string(x.text).c_str(), nullptr) != x.value)
            fails.push_back(fmt::format("decimal '{}' does not read back as the stored {}", x.text, x.value));
        return *q;
    };
    Coeffs<Q> k = coeffs_of<Q>(tab, check_text);
    const bool exact = exact_method(tab);
    auto equal = [&](const Q& x, const Q& y) { return exact ? x == y : std::fabs(to_ld(x - y)) <= kDecimalTol; };

    if (k.c[0] != 0) fails.push_back("c_1 is not 0 (explicit methods start at t)");
    for (std::size_t i = 0; i < s; ++i) {
        Q row(0);
        for (std::size_t j = 0; j < i; ++j) row += k.A[i][j];
        if (!equal(row, k.c[i])) fails.push_back(fmt::format("row {} of A does not sum to c_{}", i + 1, i + 1));
    }
    if (tab.adaptive())
        for (std::size_t i = 0; i < s; ++i)
            if (!equal(k.e[i], k.b[i] - k.bhat[i])) fails.push_back(fmt::format("e_{} != b_{} - b_hat_{}", i + 1, i + 1, i + 1));
    if (tab.fsal) {
        // The last stage is f(t + h, y_new): c_s = 1, its row of A is b, and b_s = 0.
        if (k.c[s - 1] != 1) fails.push_back("FSAL method with c_s != 1");
        if (k.b[s - 1] != 0) fails.push_back("FSAL method with b_s != 0");
        for (std::size_t j = 0; j + 1 < s; ++j)
            if (k.A[s - 1][j] != k.b[j]) fails.push_back(fmt::format("FSAL: a_{}{} != b_{}", s, j + 1, j + 1));
    }

    auto phi = stage_weights(k, trees());
    check_weights("b", k.b, phi, tab.order, exact, fails);
    if (tab.adaptive()) check_weights("b_hat", k.bhat, phi, tab.embedded_order, exact, fails);
    return fails;
}

// ---- the table --------------------------------------------------------------------

struct Expected {
    std::string_view key;
    int order, embedded, stages;
    bool fsal;
};

// Orders, stage counts and FSAL from the publications (references sheet):
// Euler; explicit midpoint and Heun (HNW I, II.1); Kutta 1901 (rk4, 3/8 rule);
// Bogacki & Shampine 1989; Dormand & Prince 1980; Tsitouras 2011; Cash & Karp 1990.
constexpr Expected kExpected[] = {
    {"euler", 1, 0, 1, false},
    {"midpoint", 2, 0, 2, false},
    {"heun", 2, 0, 2, false},
    {"rk4", 4, 0, 4, false},
    {"rk38", 4, 0, 4, false},
    {"bogacki-shampine", 3, 2, 4, true},
    {"dormand-prince", 5, 4, 7, true},
    {"tsitouras", 5, 4, 7, true},
    {"cash-karp", 5, 4, 6, false},
};

TEST(RootedTrees, CountsPerOrderAreTheKnownOnes) {
    // Number of rooted trees with n vertices: 1, 1, 2, 4, 9, 20 (Cayley; OEIS A000081; HNW I, II.2).
    int count[kMaxTreeOrder + 1] = {};
    for (const Tree& t : trees()) ++count[t.order];
    EXPECT_EQ(count[1], 1);
    EXPECT_EQ(count[2], 1);
    EXPECT_EQ(count[3], 2);
    EXPECT_EQ(count[4], 4);
    EXPECT_EQ(count[5], 9);
    EXPECT_EQ(count[6], 20);
    // gamma of the tall tree of order 5 is 5! = 120, of the bushy one 5 (HNW I, II.2).
    Int tall = 0, bushy = 1000;
    for (const Tree& t : trees())
        if (t.order == 5) {
            tall = t.gamma > tall ? t.gamma : tall;
            bushy = t.gamma < bushy ? t.gamma : bushy;
        }
    EXPECT_EQ(tall, 120);
    EXPECT_EQ(bushy, 5);
}

TEST(Tableaux, TheTableHoldsEveryMethodWithItsPublishedShape) {
    EXPECT_EQ(meander::tableaux().size(), std::size(kExpected));
    for (const Expected& x : kExpected) {
        const Tableau* tab = meander::find_tableau(x.key);
        ASSERT_NE(tab, nullptr) << x.key;
        EXPECT_EQ(tab->key, x.key);
        EXPECT_EQ(tab->order, x.order) << x.key;
        EXPECT_EQ(tab->embedded_order, x.embedded) << x.key;
        EXPECT_EQ(tab->stages, x.stages) << x.key;
        EXPECT_EQ(tab->fsal, x.fsal) << x.key;
        EXPECT_FALSE(tab->title.empty()) << x.key;
        EXPECT_FALSE(tab->source.empty()) << x.key;
    }
    EXPECT_EQ(meander::find_tableau("no-such-method"), nullptr);
}

TEST(Tableaux, SatisfyTheOrderConditionsOfTheirOrders) {
    for (const Tableau& tab : meander::tableaux()) {
        auto fails = tableau_failures(tab);
        for (const auto& f : fails) ADD_FAILURE() << tab.key << ": " << f;
    }
}

TEST(Tableaux, ExactMethodsAreWrittenAsFractions) {
    // Only Tsitouras is published in decimals; the rest must be checkable exactly.
    for (const Tableau& tab : meander::tableaux())
        if (tab.key != "tsitouras") {
            EXPECT_TRUE(exact_method(tab)) << tab.key;
        }
}

// A wrong coefficient must be caught: perturb a copy of each method in turn.
TEST(Tableaux, APerturbedCoefficientIsCaught) {
    for (const Tableau& orig : meander::tableaux()) {
        // Two entries of one row of A moved by +d and -d, so the row still sums
        // to c and only the order conditions can notice (for two-stage methods
        // b_1, b_2 instead, keeping sum b = 1; Euler: b_1 alone).
        Tableau tab = orig;
        std::string texts[2];
        auto shift = [&](Coefficient& x, int sign, std::string& store) {
            Q q = *parse_exact(x.text) + Q(Int(sign), Int(1000000));
            store = fmt::format("{}/{}", q.numerator().str(), q.denominator().str());
            x.text = store;
            x.value = static_cast<double>(to_ld(q));
        };
        if (tab.stages > 2) {
            int row = tab.fsal ? tab.stages - 2 : tab.stages - 1;
            shift(tab.a[static_cast<std::size_t>(row * (row - 1) / 2)], 1, texts[0]);
            shift(tab.a[static_cast<std::size_t>(row * (row - 1) / 2 + 1)], -1, texts[1]);
        } else {
            shift(tab.b[0], 1, texts[0]);
            if (tab.stages == 2) shift(tab.b[1], -1, texts[1]);
        }
        auto fails = tableau_failures(tab);
        bool order_caught = false;
        for (const auto& f : fails) order_caught = order_caught || f.find("order condition") != std::string::npos;
        EXPECT_TRUE(order_caught) << orig.key << ": perturbed coefficients passed the order conditions";

        // A stored double one ulp off its text.
        Tableau tab2 = orig;
        tab2.b[0].value = std::nextafter(tab2.b[0].value, HUGE_VAL);
        EXPECT_FALSE(tableau_failures(tab2).empty()) << orig.key << ": b_1 one ulp off, nothing failed";

        // An understated order.
        Tableau tab3 = orig;
        tab3.order -= 1;
        EXPECT_FALSE(tableau_failures(tab3).empty()) << orig.key << ": order understated, nothing failed";

        if (orig.adaptive()) {
            Tableau tab4 = orig;
            tab4.e[0] = tab4.e[1];
            tab4.e[1] = orig.e[0];
            if (orig.e[0].text != orig.e[1].text) {
                EXPECT_FALSE(tableau_failures(tab4).empty()) << orig.key << ": swapped e_1, e_2, nothing failed";
            }
            Tableau tab5 = orig;
            tab5.embedded_order += 1;
            EXPECT_FALSE(tableau_failures(tab5).empty()) << orig.key << ": embedded order overstated, nothing failed";
        }
    }
}

// What the integrator computes with: the stored doubles. They meet the
// conditions only to their rounding (~1.1e-16 relative, times the coefficient
// sizes and the number of terms: Tsitouras, with b_5 ~ -3.3 and a_ij up to
// ~13, reaches 1.05e-14); 5e-14 in long double is that bound with room.
TEST(Tableaux, StoredDoublesMeetTheConditionsToRounding) {
    constexpr long double kStoredTol = 5e-14L;
    for (const Tableau& tab : meander::tableaux()) {
        Coeffs<long double> k = coeffs_of<long double>(tab, [](const Coefficient& x) { return static_cast<long double>(x.value); });
        auto phi = stage_weights(k, trees());
        for (std::size_t n = 0; n < trees().size(); ++n) {
            long double inv_gamma = 1.0L / trees()[n].gamma.convert_to<long double>();
            if (trees()[n].order <= tab.order) {
                EXPECT_LE(std::fabs(dot(k.b, phi[n]) - inv_gamma), kStoredTol) << tab.key << " b, tree " << tree_name(n);
            }
            if (tab.adaptive() && trees()[n].order <= tab.embedded_order) {
                EXPECT_LE(std::fabs(dot(k.bhat, phi[n]) - inv_gamma), kStoredTol) << tab.key << " b_hat, tree " << tree_name(n);
            }
        }
        for (std::size_t i = 0; i < k.b.size() && tab.adaptive(); ++i)
            EXPECT_LE(std::fabs(k.e[i] - (k.b[i] - k.bhat[i])), kStoredTol) << tab.key << " e_" << i + 1;
    }
}

// ---- stability polynomials ------------------------------------------------------------

// R(z) = 1 + sum_k (b^T A^(k-1) 1) z^k (HNW II, IV.2), coefficients k = 0..s.
std::vector<Q> stability_coefficients(const Tableau& tab) {
    Coeffs<Q> k = coeffs_of<Q>(tab, [](const Coefficient& x) { return *parse_exact(x.text); });
    const auto s = static_cast<std::size_t>(k.s);
    std::vector<Q> r{Q(1)};
    std::vector<Q> v(s, Q(1));  // A^(k-1) 1
    for (std::size_t n = 1; n <= s; ++n) {
        r.push_back(dot(k.b, v));
        std::vector<Q> w(s, Q(0));
        for (std::size_t i = 0; i < s; ++i)
            for (std::size_t j = 0; j < i; ++j) w[i] += k.A[i][j] * v[j];
        v = w;
    }
    return r;
}

Q eval_poly(const std::vector<Q>& r, const Q& z) {
    Q acc(0);
    for (std::size_t n = r.size(); n-- > 0;) acc = acc * z + r[n];
    return acc;
}

TEST(StabilityPolynomial, MatchesTheExponentialUpToTheOrder) {
    for (const Tableau& tab : meander::tableaux()) {
        auto r = stability_coefficients(tab);
        Int fact = 1;
        for (int n = 0; n <= tab.order; ++n) {
            if (n > 0) fact *= n;
            if (exact_method(tab))
                EXPECT_EQ(r[static_cast<std::size_t>(n)], Q(Int(1), fact)) << tab.key << " z^" << n;
            else
                EXPECT_NEAR(static_cast<double>(to_ld(r[static_cast<std::size_t>(n)] - Q(Int(1), fact))), 0.0, kDecimalTol)
                    << tab.key << " z^" << n;
        }
    }
}

TEST(StabilityPolynomial, CoefficientsBeyondTheOrder) {
    // From the reference sheet (HNW II, IV.2; Tsitouras 2011): DP5 z^6/600,
    // Cash-Karp z^6/800, Tsitouras 0.00143221132481 z^6; z^7 vanishes for DP5
    // and Tsitouras because b_7 = 0 (FSAL).
    auto dp = stability_coefficients(*meander::find_tableau("dormand-prince"));
    ASSERT_EQ(dp.size(), 8u);
    EXPECT_EQ(dp[6], Q(Int(1), Int(600)));
    EXPECT_EQ(dp[7], Q(0));
    auto ck = stability_coefficients(*meander::find_tableau("cash-karp"));
    ASSERT_EQ(ck.size(), 7u);
    EXPECT_EQ(ck[6], Q(Int(1), Int(800)));
    auto ts = stability_coefficients(*meander::find_tableau("tsitouras"));
    ASSERT_EQ(ts.size(), 8u);
    // 12 significant digits given: half a unit of the last one.
    EXPECT_NEAR(static_cast<double>(to_ld(ts[6])), 0.00143221132481, 5e-15);
    EXPECT_NEAR(static_cast<double>(to_ld(ts[7])), 0.0, kDecimalTol);
    // Fourth-order methods of four stages have R = the degree-4 Taylor polynomial exactly.
    for (auto key : {"rk4", "rk38"}) EXPECT_EQ(stability_coefficients(*meander::find_tableau(key)).size(), 5u) << key;
}

TEST(StabilityPolynomial, ValuesAtPlusAndMinusOne) {
    // One step h = 1 of y' = y and y' = -y from y0 = 1 (reference sheet, re-derived exactly).
    struct Row {
        std::string_view key;
        Q at_plus, at_minus;
    };
    const Row rows[] = {
        {"euler", Q(2), Q(0)},
        {"midpoint", Q(5, 2), Q(1, 2)},
        {"heun", Q(5, 2), Q(1, 2)},
        {"bogacki-shampine", Q(8, 3), Q(1, 3)},
        {"rk4", Q(65, 24), Q(3, 8)},
        {"rk38", Q(65, 24), Q(3, 8)},
        {"dormand-prince", Q(1631, 600), Q(221, 600)},
    };
    for (const Row& row : rows) {
        auto r = stability_coefficients(*meander::find_tableau(row.key));
        EXPECT_EQ(eval_poly(r, Q(1)), row.at_plus) << row.key;
        EXPECT_EQ(eval_poly(r, Q(-1)), row.at_minus) << row.key;
    }
    EXPECT_EQ(eval_poly(stability_coefficients(*meander::find_tableau("cash-karp")), Q(1)), Q(6523, 2400));
    EXPECT_NEAR(static_cast<double>(to_ld(eval_poly(stability_coefficients(*meander::find_tableau("tsitouras")), Q(1)))),
                2.7180988779914741, 1e-14);
}

TEST(StabilityPolynomial, HarmonicOscillatorEnergyFactors) {
    // x' = v, v' = -x: a step of size h multiplies x^2 + v^2 by |R(ih)|^2
    // (HNW II, IV.2). Reference sheet, h = 0.1, 100 steps: Euler (1 + h^2)^100 =
    // 2.7048138294215285, second order (1 + h^4/4)^100 = 1.0025030962780892,
    // RK4 (1 - h^6/72 + h^8/576)^100 = 0.9999986128481709. Computed here from
    // R exactly, and by the integrator with 100 fixed steps over [0, 10].
    struct Row {
        std::string_view key;
        double energy;
    };
    const Row rows[] = {{"euler", 2.7048138294215285},     {"midpoint", 1.0025030962780892},
                        {"heun", 1.0025030962780892},      {"rk4", 0.9999986128481709},
                        {"rk38", 0.9999986128481709}};
    for (const Row& row : rows) {
        auto r = stability_coefficients(*meander::find_tableau(row.key));
        // R(ih) = re + i im with h = 1/10: even powers to re, odd to im, signs by i^k.
        Q re(0), im(0), hk(1);
        for (std::size_t k = 0; k < r.size(); ++k, hk *= Q(1, 10)) {
            const Q term = r[k] * hk;
            switch (k % 4) {
            case 0: re += term; break;
            case 1: im += term; break;
            case 2: re -= term; break;
            default: im -= term; break;
            }
        }
        Q factor = re * re + im * im, total(1);
        for (int n = 0; n < 100; ++n) total *= factor;
        // The sheet's values were evaluated in double from a rounded h (its
        // error ~6e-15 relative; the exact rationals differ from it by up to 5.8e-15).
        EXPECT_NEAR(static_cast<double>(to_ld(total)), row.energy, 1e-14 * row.energy) << row.key;

        meander::SolverSpec spec;
        spec.method = std::string(row.key);
        spec.steps = 100;
        Eigen::VectorXd y(2);
        y << 1.0, 0.0;
        meander::IntegrateStats stats;
        const meander::Field osc = [](double, const Eigen::VectorXd& x, Eigen::VectorXd& dx) {
            dx.resize(2);
            dx << x[1], -x[0];
        };
        ASSERT_EQ(meander::integrate(osc, 0.0, 10.0, y, spec, stats), meander::IntegrateStatus::ok) << row.key;
        EXPECT_NEAR(y.squaredNorm(), row.energy, 1e-13) << row.key;
        EXPECT_EQ(stats.field_evals, 100L * meander::find_tableau(row.key)->stages) << row.key;
    }
}

// ---- the published coefficients themselves ---------------------------------------------

// The order conditions leave free parameters; these are the published choices
// (reference sheet: Dormand & Prince 1980; Bogacki & Shampine 1989; Cash &
// Karp 1990; HNW I, II.1 for the classical methods), compared exactly.
struct Published {
    std::string_view key;
    std::vector<std::string_view> c, b, bhat;
};

TEST(Tableaux, AreThePublishedOnes) {
    const Published pubs[] = {
        {"euler", {"0"}, {"1"}, {}},
        {"midpoint", {"0", "1/2"}, {"0", "1"}, {}},
        {"heun", {"0", "1"}, {"1/2", "1/2"}, {}},
        {"rk4", {"0", "1/2", "1/2", "1"}, {"1/6", "1/3", "1/3", "1/6"}, {}},
        {"rk38", {"0", "1/3", "2/3", "1"}, {"1/8", "3/8", "3/8", "1/8"}, {}},
        {"bogacki-shampine", {"0", "1/2", "3/4", "1"}, {"2/9", "1/3", "4/9", "0"}, {"7/24", "1/4", "1/3", "1/8"}},
        {"dormand-prince",
         {"0", "1/5", "3/10", "4/5", "8/9", "1", "1"},
         {"35/384", "0", "500/1113", "125/192", "-2187/6784", "11/84", "0"},
         {"5179/57600", "0", "7571/16695", "393/640", "-92097/339200", "187/2100", "1/40"}},
        {"cash-karp",
         {"0", "1/5", "3/10", "3/5", "1", "7/8"},
         {"37/378", "0", "250/621", "125/594", "0", "512/1771"},
         {"2825/27648", "0", "18575/48384", "13525/55296", "277/14336", "1/4"}},
    };
    auto same = [](const std::vector<Coefficient>& got, const std::vector<std::string_view>& want, std::string_view what,
                   std::string_view key) {
        ASSERT_EQ(got.size(), want.size()) << key << " " << what;
        for (std::size_t i = 0; i < want.size(); ++i)
            EXPECT_EQ(*parse_exact(got[i].text), *parse_exact(want[i])) << key << " " << what << "_" << i + 1;
    };
    for (const Published& p : pubs) {
        const Tableau* tab = meander::find_tableau(p.key);
        ASSERT_NE(tab, nullptr) << p.key;
        same(tab->c, p.c, "c", p.key);
        same(tab->b, p.b, "b", p.key);
        same(tab->bhat, p.bhat, "b_hat", p.key);
    }
    // Dormand-Prince's fifth row, the one most often mistyped (J. Comput. Appl. Math. 6, 1980).
    const Tableau* dp = meander::find_tableau("dormand-prince");
    const char* row5[] = {"19372/6561", "-25360/2187", "64448/6561", "-212/729"};
    for (int j = 0; j < 4; ++j) EXPECT_EQ(*parse_exact(dp->a_coef(4, j).text), *parse_exact(row5[j])) << "a5" << j + 1;
    // Tsitouras 2011, c and b as printed (16 digits): agreement to their last digit.
    const Tableau* ts = meander::find_tableau("tsitouras");
    const double tc[] = {0, 0.161, 0.327, 0.9, 0.98002554090450968, 1, 1};
    const double tb[] = {0.09646076681806523, 0.01, 0.4798896504144996, 1.379008574103742, -3.290069515436081,
                         2.324710524099774, 0};
    for (std::size_t i = 0; i < 7; ++i) {
        EXPECT_NEAR(ts->c[i].value, tc[i], 1e-15) << "c_" << i + 1;
        EXPECT_NEAR(ts->b[i].value, tb[i], 2e-15) << "b_" << i + 1;
    }
}

TEST(RationalParsing, ReadsTheTextFormsExactly) {
    // Sanity of the test's own reader against values worked by hand.
    EXPECT_EQ(*parse_exact("-19372/6561"), Q(Int(-19372), Int(6561)));
    EXPECT_EQ(*parse_exact("0.161"), Q(161, 1000));
    EXPECT_EQ(*parse_exact("-3.5e-2"), Q(-7, 200));
    EXPECT_EQ(*parse_exact("8"), Q(8));
    EXPECT_FALSE(parse_exact("1/0"));
    EXPECT_FALSE(parse_exact("x"));
    EXPECT_TRUE(correctly_rounded(Q(1, 3), 1.0 / 3.0));
    EXPECT_FALSE(correctly_rounded(Q(1, 3), std::nextafter(1.0 / 3.0, 1.0)));
    EXPECT_EQ(exact_of(0.375), Q(3, 8));
}

}  // namespace
