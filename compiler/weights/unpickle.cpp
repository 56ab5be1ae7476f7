// The restricted unpickler (see unpickle.hpp). Opcodes follow the pickle
// protocol as Python's Lib/pickletools.py documents it, protocols 2 to 4.
#include "unpickle.hpp"

#include <fmt/format.h>

#include <array>
#include <cstring>
#include <unordered_map>

#include "formats.hpp"

namespace meander::weights {

namespace {

PyRef make(PyValue::Kind kind) {
    auto v = std::make_shared<PyValue>();
    v->kind = kind;
    return v;
}

const char* const kAllowedGlobals[] = {"collections.OrderedDict", "torch._utils._rebuild_tensor_v2",
                                       "torch._utils._rebuild_parameter"};

bool allowed_global(const std::string& name) {
    for (const char* g : kAllowedGlobals)
        if (name == g) return true;
    return name.rfind("torch.", 0) == 0 && element_type(name.substr(6)) != nullptr &&
           name.size() > 13 && name.compare(name.size() - 7, 7, "Storage") == 0;
}

class Unpickler {
public:
    explicit Unpickler(std::string_view b) : b_(b) {}

    std::optional<PyRef> run(std::string& error) {
        while (true) {
            if (at_ >= b_.size()) return fail(error, "the pickle ends without its STOP opcode");
            const std::size_t op_at = at_;
            const unsigned char op = static_cast<unsigned char>(b_[at_++]);
            if (!step(op, op_at, error)) return std::nullopt;
            if (op == '.') {
                if (stack_.size() != 1) return fail(error, "the pickle stops with a damaged stack");
                return stack_.back();
            }
        }
    }

private:
    std::string_view b_;
    std::size_t at_ = 0;
    std::vector<PyRef> stack_;
    std::vector<std::size_t> marks_;
    std::unordered_map<std::uint64_t, PyRef> memo_;

    std::nullopt_t fail(std::string& error, std::string message) {
        error = std::move(message);
        return std::nullopt;
    }
    bool bad(std::string& error, std::size_t op_at, const std::string& message) {
        error = fmt::format("pickle byte {}: {}", op_at, message);
        return false;
    }
    bool take(std::size_t n, std::string_view& out) {
        if (n > b_.size() - at_) return false;
        out = b_.substr(at_, n);
        at_ += n;
        return true;
    }
    bool uint(std::size_t n, std::uint64_t& v) {
        std::string_view s;
        if (!take(n, s)) return false;
        v = read_le(s, 0, n);
        return true;
    }
    bool line(std::string& out) {
        std::size_t nl = b_.find('\n', at_);
        if (nl == std::string_view::npos) return false;
        out = std::string(b_.substr(at_, nl - at_));
        at_ = nl + 1;
        return true;
    }
    bool pop(PyRef& v) {
        if (stack_.empty() || (!marks_.empty() && stack_.size() == marks_.back())) return false;
        v = stack_.back();
        stack_.pop_back();
        return true;
    }
    bool pop_mark(std::vector<PyRef>& items) {
        if (marks_.empty()) return false;
        std::size_t m = marks_.back();
        marks_.pop_back();
        items.assign(stack_.begin() + static_cast<std::ptrdiff_t>(m), stack_.end());
        stack_.resize(m);
        return true;
    }
    bool top(PyRef& v) {
        if (stack_.empty() || (!marks_.empty() && stack_.size() == marks_.back())) return false;
        v = stack_.back();
        return true;
    }

    static bool as_size(const PyRef& v, std::size_t& out) {
        if (v->kind != PyValue::Kind::integer || v->integer < 0) return false;
        out = static_cast<std::size_t>(v->integer);
        return true;
    }
    static bool as_sizes(const PyRef& v, std::vector<std::size_t>& out) {
        if (v->kind != PyValue::Kind::tuple) return false;
        out.clear();
        for (const auto& x : v->items) {
            std::size_t n = 0;
            if (!as_size(x, n)) return false;
            out.push_back(n);
        }
        return true;
    }

    // REDUCE on an allowed global, interpreted as data.
    bool call(const PyRef& fn, const PyRef& args, std::size_t op_at, std::string& error) {
        const std::string& name = fn->text;
        if (fn->kind != PyValue::Kind::global || args->kind != PyValue::Kind::tuple)
            return bad(error, op_at, fmt::format("a call of {} is not one a dictionary of tensors makes", describe(*fn)));
        const auto& a = args->items;
        if (name == "collections.OrderedDict") {
            if (!a.empty()) return bad(error, op_at, "OrderedDict is called with arguments");
            stack_.push_back(make(PyValue::Kind::dict));
            return true;
        }
        if (name == "torch._utils._rebuild_tensor_v2") {
            auto t = make(PyValue::Kind::tensor);
            if (a.size() < 4 || a[0]->kind != PyValue::Kind::storage || !as_size(a[1], t->offset) ||
                !as_sizes(a[2], t->shape) || !as_sizes(a[3], t->strides) || t->shape.size() != t->strides.size())
                return bad(error, op_at, "_rebuild_tensor_v2 is called with arguments other than (storage, offset, size, stride, ...)");
            if (t->shape.size() > max_rank)
                return bad(error, op_at, fmt::format("a tensor of shape {} has more than {} dimensions", shape_text(t->shape), max_rank));
            t->items.push_back(a[0]);
            stack_.push_back(t);
            return true;
        }
        if (name == "torch._utils._rebuild_parameter") {
            if (a.empty() || a[0]->kind != PyValue::Kind::tensor)
                return bad(error, op_at, "_rebuild_parameter is called without a tensor");
            stack_.push_back(a[0]);
            return true;
        }
        return bad(error, op_at, fmt::format("a call of {} is not one a dictionary of tensors makes", name));
    }

    bool step(unsigned char op, std::size_t op_at, std::string& error) {
        const auto truncated = [&] { return bad(error, op_at, "the pickle is truncated"); };
        const auto damaged = [&] { return bad(error, op_at, fmt::format("opcode 0x{:02x} finds a damaged stack", op)); };
        std::uint64_t n = 0;
        std::string_view s;
        PyRef v, w, x;
        switch (op) {
        case 0x80:  // PROTO
            if (!uint(1, n)) return truncated();
            if (n < 2 || n > 5) return bad(error, op_at, fmt::format("pickle protocol {} (2 to 5 are read)", n));
            return true;
        case 0x95:  // FRAME: a length hint only
            return uint(8, n) ? true : truncated();
        case '.':  // STOP
            return true;
        case '(':  // MARK
            marks_.push_back(stack_.size());
            return true;
        case '}':  // EMPTY_DICT
            stack_.push_back(make(PyValue::Kind::dict));
            return true;
        case ']':  // EMPTY_LIST
            stack_.push_back(make(PyValue::Kind::list));
            return true;
        case ')':  // EMPTY_TUPLE
            stack_.push_back(make(PyValue::Kind::tuple));
            return true;
        case 'N':
            stack_.push_back(make(PyValue::Kind::none));
            return true;
        case 0x88:  // NEWTRUE
        case 0x89:  // NEWFALSE
            v = make(PyValue::Kind::boolean);
            v->integer = op == 0x88;
            stack_.push_back(v);
            return true;
        case 'K':  // BININT1
        case 'M':  // BININT2
        case 'J':  // BININT
            if (!uint(op == 'K' ? 1 : op == 'M' ? 2 : 4, n)) return truncated();
            v = make(PyValue::Kind::integer);
            v->integer = op == 'J' ? static_cast<std::int32_t>(static_cast<std::uint32_t>(n)) : static_cast<std::int64_t>(n);
            stack_.push_back(v);
            return true;
        case 0x8a: {  // LONG1
            if (!uint(1, n)) return truncated();
            if (n > 8) return bad(error, op_at, fmt::format("an integer of {} bytes (at most 8 are read)", n));
            if (!take(static_cast<std::size_t>(n), s)) return truncated();
            std::uint64_t u = n ? read_le(s, 0, static_cast<std::size_t>(n)) : 0;
            if (n > 0 && n < 8 && (static_cast<unsigned char>(s[n - 1]) & 0x80)) u |= ~std::uint64_t{0} << (8 * n);
            v = make(PyValue::Kind::integer);
            v->integer = static_cast<std::int64_t>(u);
            stack_.push_back(v);
            return true;
        }
        case 'G': {  // BINFLOAT, big-endian
            if (!take(8, s)) return truncated();
            std::uint64_t u = 0;
            for (char c : s) u = (u << 8) | static_cast<unsigned char>(c);
            v = make(PyValue::Kind::real);
            std::memcpy(&v->real, &u, 8);
            stack_.push_back(v);
            return true;
        }
        case 'X':   // BINUNICODE
        case 0x8c:  // SHORT_BINUNICODE
        case 0x8d:  // BINUNICODE8
        case 'B':   // BINBYTES
        case 'C':   // SHORT_BINBYTES
        case 0x8e:  // BINBYTES8
        case 'T':   // BINSTRING
        case 'U': {  // SHORT_BINSTRING
            std::size_t len_bytes = (op == 0x8c || op == 'C' || op == 'U') ? 1 : (op == 0x8d || op == 0x8e) ? 8 : 4;
            if (!uint(len_bytes, n)) return truncated();
            if (n > b_.size() - at_) return truncated();
            take(static_cast<std::size_t>(n), s);
            v = make((op == 'B' || op == 'C' || op == 0x8e) ? PyValue::Kind::bytes : PyValue::Kind::string);
            v->text = std::string(s);
            stack_.push_back(v);
            return true;
        }
        case 'q':   // BINPUT
        case 'r':   // LONG_BINPUT
            if (!uint(op == 'q' ? 1 : 4, n)) return truncated();
            if (!top(v)) return damaged();
            memo_[n] = v;
            return true;
        case 0x94:  // MEMOIZE
            if (!top(v)) return damaged();
            memo_[memo_.size()] = v;
            return true;
        case 'h':  // BINGET
        case 'j': {  // LONG_BINGET
            if (!uint(op == 'h' ? 1 : 4, n)) return truncated();
            auto it = memo_.find(n);
            if (it == memo_.end()) return bad(error, op_at, fmt::format("memo entry {} is read before it is written", n));
            stack_.push_back(it->second);
            return true;
        }
        case 'c':     // GLOBAL "module\nname\n"
        case 0x93: {  // STACK_GLOBAL
            std::string module, name;
            if (op == 'c') {
                if (!line(module) || !line(name)) return truncated();
            } else {
                if (!pop(w) || !pop(v) || v->kind != PyValue::Kind::string || w->kind != PyValue::Kind::string) return damaged();
                module = v->text;
                name = w->text;
            }
            std::string full = module + "." + name;
            if (!allowed_global(full))
                return bad(error, op_at, fmt::format("global '{}' is outside what a dictionary of tensors uses "
                                                     "(collections.OrderedDict, torch._utils._rebuild_tensor_v2, "
                                                     "torch._utils._rebuild_parameter and the torch storage types); "
                                                     "meander executes nothing from a checkpoint", full));
            v = make(PyValue::Kind::global);
            v->text = full;
            stack_.push_back(v);
            return true;
        }
        case 't': {  // TUPLE
            v = make(PyValue::Kind::tuple);
            if (!pop_mark(v->items)) return damaged();
            stack_.push_back(v);
            return true;
        }
        case 0x85:  // TUPLE1
        case 0x86:  // TUPLE2
        case 0x87: {  // TUPLE3
            std::size_t k = op - 0x84u;
            v = make(PyValue::Kind::tuple);
            v->items.resize(k);
            for (std::size_t i = k; i-- > 0;)
                if (!pop(v->items[i])) return damaged();
            stack_.push_back(v);
            return true;
        }
        case 'l': {  // LIST
            v = make(PyValue::Kind::list);
            if (!pop_mark(v->items)) return damaged();
            stack_.push_back(v);
            return true;
        }
        case 'a':  // APPEND
            if (!pop(w) || !top(v) || v->kind != PyValue::Kind::list) return damaged();
            v->items.push_back(w);
            return true;
        case 'e': {  // APPENDS
            std::vector<PyRef> items;
            if (!pop_mark(items) || !top(v) || v->kind != PyValue::Kind::list) return damaged();
            v->items.insert(v->items.end(), items.begin(), items.end());
            return true;
        }
        case 's':  // SETITEM
            if (!pop(x) || !pop(w) || !top(v) || v->kind != PyValue::Kind::dict) return damaged();
            v->entries.emplace_back(w, x);
            return true;
        case 'u': {  // SETITEMS
            std::vector<PyRef> items;
            if (!pop_mark(items) || items.size() % 2 != 0 || !top(v) || v->kind != PyValue::Kind::dict) return damaged();
            for (std::size_t i = 0; i < items.size(); i += 2) v->entries.emplace_back(items[i], items[i + 1]);
            return true;
        }
        case 'R':  // REDUCE
            if (!pop(w) || !pop(v)) return damaged();
            return call(v, w, op_at, error);
        case 'b':  // BUILD: the attributes of a state dict (its _metadata) or a parameter, set aside unread
            if (!pop(w) || !top(v)) return damaged();
            if (v->kind != PyValue::Kind::dict && v->kind != PyValue::Kind::tensor)
                return bad(error, op_at, fmt::format("BUILD sets the state of {}", describe(*v)));
            return true;
        case 'Q': {  // BINPERSID: ('storage', storage type, key, location, numel)
            if (!pop(v)) return damaged();
            const auto& t = v->items;
            std::size_t numel = 0;
            if (v->kind != PyValue::Kind::tuple || t.size() != 5 || t[0]->kind != PyValue::Kind::string ||
                t[0]->text != "storage" || t[1]->kind != PyValue::Kind::global || t[2]->kind != PyValue::Kind::string ||
                !as_size(t[4], numel))
                return bad(error, op_at, "a persistent id other than ('storage', type, key, location, size)");
            w = make(PyValue::Kind::storage);
            w->text = t[1]->text.substr(6);  // after "torch."
            w->key = t[2]->text;
            w->numel = numel;
            stack_.push_back(w);
            return true;
        }
        default: {
            const char c = static_cast<char>(op);
            return bad(error, op_at, fmt::format("pickle opcode 0x{:02x}{} is not one a dictionary of tensors uses", op,
                                                 (op >= 0x20 && op < 0x7f) ? fmt::format(" ('{}')", c) : std::string()));
        }
        }
    }
};

}  // namespace

std::string describe(const PyValue& v) {
    switch (v.kind) {
    case PyValue::Kind::none: return "None";
    case PyValue::Kind::boolean: return v.integer ? "True" : "False";
    case PyValue::Kind::integer: return fmt::format("the number {}", v.integer);
    case PyValue::Kind::real: return fmt::format("the number {}", v.real);
    case PyValue::Kind::string: return "a string";
    case PyValue::Kind::bytes: return "bytes";
    case PyValue::Kind::tuple: return "a tuple";
    case PyValue::Kind::list: return "a list";
    case PyValue::Kind::dict: return "a dictionary";
    case PyValue::Kind::global: return fmt::format("'{}'", v.text);
    case PyValue::Kind::storage: return "a storage";
    case PyValue::Kind::tensor: return fmt::format("a tensor of shape {}", shape_text(v.shape));
    }
    return "a value";
}

std::optional<PyRef> unpickle(std::string_view bytes, std::string& error) {
    Unpickler u(bytes);
    return u.run(error);
}

}  // namespace meander::weights
