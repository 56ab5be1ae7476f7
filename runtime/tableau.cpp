#include "tableau.hpp"

#include <charconv>
#include <cstdint>
#include <initializer_list>

namespace meander {

namespace {

// Exact text to double. A fraction "p/q" divides two exactly representable
// integers once, so the quotient is correctly rounded (IEEE division);
// a decimal goes through from_chars, which rounds correctly and ignores the
// locale.
double parse_value(std::string_view text) {
    const auto slash = text.find('/');
    if (slash == std::string_view::npos) {
        double v = 0.0;
        std::from_chars(text.data(), text.data() + text.size(), v);
        return v;
    }
    std::int64_t num = 0;
    std::int64_t den = 1;
    const std::string_view n = text.substr(0, slash);
    const std::string_view d = text.substr(slash + 1);
    // from_chars does not take a leading '+', and none of the texts uses one.
    std::from_chars(n.data(), n.data() + n.size(), num);
    std::from_chars(d.data(), d.data() + d.size(), den);
    return static_cast<double>(num) / static_cast<double>(den);
}

std::vector<Coefficient> coefs(std::initializer_list<std::string_view> texts) {
    std::vector<Coefficient> out;
    out.reserve(texts.size());
    for (std::string_view t : texts) out.push_back(Coefficient{t, parse_value(t)});
    return out;
}

std::vector<Tableau> build() {
    std::vector<Tableau> t;

    {
        Tableau m;
        m.key = "euler";
        m.title = "Euler (explicit)";
        m.source = "Euler 1768; HNW I, II.1";
        m.order = 1;
        m.stages = 1;
        m.c = coefs({"0"});
        m.b = coefs({"1"});
        t.push_back(std::move(m));
    }
    {
        Tableau m;
        m.key = "midpoint";
        m.title = "explicit midpoint";
        m.source = "Runge 1895; HNW I, II.1";
        m.order = 2;
        m.stages = 2;
        m.c = coefs({"0", "1/2"});
        m.a = coefs({"1/2"});
        m.b = coefs({"0", "1"});
        t.push_back(std::move(m));
    }
    {
        Tableau m;
        m.key = "heun";
        m.title = "Heun (explicit trapezoidal)";
        m.source = "Heun 1900; HNW I, II.1";
        m.order = 2;
        m.stages = 2;
        m.c = coefs({"0", "1"});
        m.a = coefs({"1"});
        m.b = coefs({"1/2", "1/2"});
        t.push_back(std::move(m));
    }
    {
        Tableau m;
        m.key = "rk4";
        m.title = "classic Runge-Kutta 4";
        m.source = "Kutta 1901; HNW I, II.1";
        m.order = 4;
        m.stages = 4;
        m.c = coefs({"0", "1/2", "1/2", "1"});
        m.a = coefs({"1/2",
                     "0", "1/2",
                     "0", "0", "1"});
        m.b = coefs({"1/6", "1/3", "1/3", "1/6"});
        t.push_back(std::move(m));
    }
    {
        Tableau m;
        m.key = "rk38";
        m.title = "Kutta's 3/8 rule";
        m.source = "Kutta 1901; HNW I, II.1";
        m.order = 4;
        m.stages = 4;
        m.c = coefs({"0", "1/3", "2/3", "1"});
        m.a = coefs({"1/3",
                     "-1/3", "1",
                     "1", "-1", "1"});
        m.b = coefs({"1/8", "3/8", "3/8", "1/8"});
        t.push_back(std::move(m));
    }
    {
        Tableau m;
        m.key = "bogacki-shampine";
        m.title = "Bogacki-Shampine 3(2)";
        m.source = "Bogacki & Shampine, Appl. Math. Lett. 2(4):321-325, 1989";
        m.order = 3;
        m.embedded_order = 2;
        m.stages = 4;
        m.fsal = true;
        m.c = coefs({"0", "1/2", "3/4", "1"});
        m.a = coefs({"1/2",
                     "0", "3/4",
                     "2/9", "1/3", "4/9"});
        m.b = coefs({"2/9", "1/3", "4/9", "0"});
        m.bhat = coefs({"7/24", "1/4", "1/3", "1/8"});
        m.e = coefs({"-5/72", "1/12", "1/9", "-1/8"});
        t.push_back(std::move(m));
    }
    {
        Tableau m;
        m.key = "dormand-prince";
        m.title = "Dormand-Prince 5(4)";
        m.source = "Dormand & Prince, J. Comput. Appl. Math. 6(1):19-26, 1980";
        m.order = 5;
        m.embedded_order = 4;
        m.stages = 7;
        m.fsal = true;
        m.c = coefs({"0", "1/5", "3/10", "4/5", "8/9", "1", "1"});
        m.a = coefs({"1/5",
                     "3/40", "9/40",
                     "44/45", "-56/15", "32/9",
                     "19372/6561", "-25360/2187", "64448/6561", "-212/729",
                     "9017/3168", "-355/33", "46732/5247", "49/176", "-5103/18656",
                     "35/384", "0", "500/1113", "125/192", "-2187/6784", "11/84"});
        m.b = coefs({"35/384", "0", "500/1113", "125/192", "-2187/6784", "11/84", "0"});
        m.bhat = coefs({"5179/57600", "0", "7571/16695", "393/640", "-92097/339200", "187/2100", "1/40"});
        m.e = coefs({"71/57600", "0", "-71/16695", "71/1920", "-17253/339200", "22/525", "-1/40"});
        t.push_back(std::move(m));
    }
    {
        // The paper prints 16 digits, which the order conditions do not complete
        // uniquely; the 40-digit values are those SUNDIALS ARKODE lists, and they
        // satisfy every order condition up to 5 and the paper's D(1) assumption to
        // ~1e-39 (tests/data/tsitouras_check.py, which also derives e). Embedding:
        // the paper's, error weights ending in 1/66; ARKODE's embedding (b_hat
        // ending in 1/40) has error weights -1.65 times these, so step counts differ.
        Tableau m;
        m.key = "tsitouras";
        m.title = "Tsitouras 5(4)";
        m.source =
            "Tsitouras, Runge-Kutta pairs of order 5(4) satisfying only the first column simplifying "
            "assumption, Comput. Math. Appl. 62(2):770-775, 2011; the paper's embedding (e7 = 1/66); "
            "40-digit coefficients as in SUNDIALS ARKODE";
        m.order = 5;
        m.embedded_order = 4;
        m.stages = 7;
        m.fsal = true;
        m.c = coefs({"0", "0.161", "0.327", "0.9", "0.9800255409045096857298102862870245954942", "1", "1"});
        m.a = coefs({"0.161",
                     "-0.008480655492356988544426874250230774675121",
                     "0.3354806554923569885444268742502307746751",
                     "2.897153057105493432130432594192938764925",
                     "-6.359448489975074843148159912383825625953",
                     "4.362295432869581411017727318190886861028",
                     "5.325864828439256604428877920840511317836",
                     "-11.74888356406282787774717033978577296189",
                     "7.495539342889836208304604784564358155659",
                     "-0.0924950663617552492565020793320719161135",
                     "5.861455442946420028659251486982647890394",
                     "-12.92096931784710929170611868178335939542",
                     "8.159367898576158643180400794539253485182",
                     "-0.07158497328140099722453054252582973869127",
                     "-0.02826905039406838290900305721271224146718",
                     "0.09646076681806522951816731316512876333712",
                     "0.01",
                     "0.479889650414499574775249532290596519913",
                     "1.379008574103741893192274821856872770756",
                     "-3.290069515436080679901047585711363850116",
                     "2.324710524099773982415355918398765796109"});
        m.b = coefs({"0.09646076681806522951816731316512876333712",
                     "0.01",
                     "0.479889650414499574775249532290596519913",
                     "1.379008574103741893192274821856872770756",
                     "-3.290069515436080679901047585711363850116",
                     "2.324710524099773982415355918398765796109",
                     "0"});
        m.bhat = coefs({"0.09824077787029100096154586377266829811215",
                        "0.01081643445965674690322363606335468624271",
                        "0.4720087724042375787649348046180702156725",
                        "1.523719581277004800729439969829507887476",
                        "-3.872426680888635904920985196363406029533",
                        "2.782792630028960929076992437231320093544",
                        "-1/66"});
        m.e = coefs({"-0.001780011052225771443378550607539534775032",
                     "-0.0008164344596567469032236360633546862427118",
                     "0.007880878010261996010314727672526304240524",
                     "-0.1447110071732629075371651479726351167200",
                     "0.5823571654525552250199376106520421794174",
                     "-0.4580821059291869466616365188325542974354",
                     "1/66"});
        t.push_back(std::move(m));
    }
    {
        Tableau m;
        m.key = "cash-karp";
        m.title = "Cash-Karp 5(4)";
        m.source = "Cash & Karp, ACM Trans. Math. Softw. 16(3):201-222, 1990";
        m.order = 5;
        m.embedded_order = 4;
        m.stages = 6;
        m.fsal = false;
        m.c = coefs({"0", "1/5", "3/10", "3/5", "1", "7/8"});
        m.a = coefs({"1/5",
                     "3/40", "9/40",
                     "3/10", "-9/10", "6/5",
                     "-11/54", "5/2", "-70/27", "35/27",
                     "1631/55296", "175/512", "575/13824", "44275/110592", "253/4096"});
        m.b = coefs({"37/378", "0", "250/621", "125/594", "0", "512/1771"});
        m.bhat = coefs({"2825/27648", "0", "18575/48384", "13525/55296", "277/14336", "1/4"});
        m.e = coefs({"-277/64512", "0", "6925/370944", "-6925/202752", "-277/14336", "277/7084"});
        t.push_back(std::move(m));
    }
    return t;
}

}  // namespace

const std::vector<Tableau>& tableaux() {
    static const std::vector<Tableau> table = build();
    return table;
}

const Tableau* find_tableau(std::string_view key) {
    for (const Tableau& t : tableaux())
        if (t.key == key) return &t;
    return nullptr;
}

}  // namespace meander
