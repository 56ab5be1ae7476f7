// Malformed descriptions: each row is a description and the exact first error
// it must produce (message, line, column, source line and caret), as the
// language reference (grammar/LANGUAGE.md) specifies. Syntax and order errors
// come from parse_description, the others from check_model (float32).
#include <gtest/gtest.h>

#include <cctype>
#include <string>
#include <vector>

#include "compiler/check.hpp"
#include "compiler/parse.hpp"
#include "test_support.hpp"

namespace meander {
namespace {

struct Row {
    const char* name;
    const char* text;
    const char* first_error;    // rendered by Diagnostics
};

// Parses, then checks if the parse succeeded; returns every diagnostic.
Diagnostics run(const std::string& text) {
    test::save_fuzz_seed("description", text);
    Source src("bad.mnd", text);
    Diagnostics diags;
    auto model = parse_description(src, diags);
    if (model) check_model(*model, src, CheckOptions{}, diags);
    return diags;
}

std::string first_error(const Diagnostics& diags) {
    for (const auto& d : diags.all())
        if (d.severity == Severity::error) return Diagnostics::render(d);
    return "(no error)";
}

const std::vector<Row> kSyntaxRows = {
    {"missing model line",
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:1: error: expected 'model NAME' as the first statement\n"
     "input x[4]\n"
     "^\n"},
    {"empty description",
     "",
     "bad.mnd:1:1: error: expected 'model NAME' as the first statement\n"
     "\n"
     "^\n"},
    {"only a comment",
     "# nothing yet\n",
     "bad.mnd:1:14: error: expected 'model NAME' as the first statement\n"
     "# nothing yet\n"
     "             ^\n"},
    {"model name starts with a digit",
     "model 3m\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: expected the model's name (a letter or '_', then letters, digits or '_')\n"
     "model 3m\n"
     "      ^\n"},
    {"missing colon",
     "model m\n"
     "input x[4]\n"
     "dense a 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:9: error: expected ':'\n"
     "dense a 4 -> 2\n"
     "        ^\n"},
    {"missing arrow",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 2\n"
     "output y[2]\n",
     "bad.mnd:3:12: error: expected '->'\n"
     "dense a: 4 2\n"
     "           ^\n"},
    {"letters in a width",
     "model m\n"
     "input x[4]\n"
     "dense a: 4x -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:10: error: expected the layer's input width (an integer)\n"
     "dense a: 4x -> 2\n"
     "         ^\n"},
    {"real number as a size",
     "model m\n"
     "input x[4.0]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:9: error: expected the input size (an integer)\n"
     "input x[4.0]\n"
     "        ^\n"},
    {"negative size",
     "model m\n"
     "input x[-4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:9: error: expected the input size (an integer)\n"
     "input x[-4]\n"
     "        ^\n"},
    {"missing closing bracket",
     "model m\n"
     "input x[4\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:1: error: expected ']'\n"
     "dense a: 4 -> 2\n"
     "^\n"},
    {"unknown activation",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2, tanhh\n"
     "output y[2]\n",
     "bad.mnd:3:18: error: expected a layer option: an activation (identity, relu, leaky-relu, tanh, sigmoid, softplus, silu, gelu, elu, softmax), 'weight', 'bias', 'from', 'no-bias', 'transposed', 'time-first' or 'weights-as'\n"
     "dense a: 4 -> 2, tanhh\n"
     "                 ^\n"},
    {"unterminated string",
     "model m\n"
     "weights \"m.npz\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:9: error: expected '\"' to end this string on the same line\n"
     "weights \"m.npz\n"
     "        ^\n"},
    {"unterminated tensor prefix",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2, from \"enc\n"
     "output y[2]\n",
     "bad.mnd:3:23: error: expected '\"' to end this string on the same line\n"
     "dense a: 4 -> 2, from \"enc\n"
     "                      ^\n"},
    {"path without quotes",
     "model m\n"
     "weights m.npz\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:9: error: expected a quoted path after 'weights'\n"
     "weights m.npz\n"
     "        ^\n"},
    {"unclosed brace before output",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  dense a: 4 -> 4\n"
     "output y[4]\n",
     "bad.mnd:5:1: error: expected '}' to close residual 'r' (opened on line 3)\n"
     "output y[4]\n"
     "^\n"},
    {"unclosed brace at end of file",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  dense a: 4 -> 4\n",
     "bad.mnd:4:18: error: expected '}' to close residual 'r' (opened on line 3)\n"
     "  dense a: 4 -> 4\n"
     "                 ^\n"},
    {"missing opening brace",
     "model m\n"
     "input x[4]\n"
     "residual r: 4\n"
     "  dense a: 4 -> 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:4:3: error: expected '{'\n"
     "  dense a: 4 -> 4\n"
     "  ^\n"},
    {"missing colon in residual",
     "model m\n"
     "input x[4]\n"
     "residual r 4 {\n"
     "  dense a: 4 -> 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:12: error: expected ':'\n"
     "residual r 4 {\n"
     "           ^\n"},
    {"missing comma in continuous header",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4 t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:17: error: expected ','\n"
     "continuous c: 4 t in [0, 1] {\n"
     "                ^\n"},
    {"missing in",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:20: error: expected 'in'\n"
     "continuous c: 4, t [0, 1] {\n"
     "                   ^\n"},
    {"interval without brackets",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in 0, 1 {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:23: error: expected '[' and the time interval\n"
     "continuous c: 4, t in 0, 1 {\n"
     "                      ^\n"},
    {"bad end time",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, one] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:27: error: expected the end time (a number, or 'gap' in a streaming model)\n"
     "continuous c: 4, t in [0, one] {\n"
     "                          ^\n"},
    {"unclosed interval",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1 {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:29: error: expected ']'\n"
     "continuous c: 4, t in [0, 1 {\n"
     "                            ^\n"},
    {"unknown solver option",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, stepz 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:15: error: expected a solver option: steps, steps-per-unit, rtol, atol, max-steps, first-step, controller, safety, min-factor, max-factor, pi-alpha or pi-beta\n"
     "  solver rk4, stepz 4\n"
     "              ^\n"},
    {"missing solver method",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver , steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: expected a solver method (such as rk4 or dormand-prince)\n"
     "  solver , steps 4\n"
     "         ^\n"},
    {"fractional step count",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4.5\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:21: error: expected the number of steps (an integer) after 'steps'\n"
     "  solver rk4, steps 4.5\n"
     "                    ^\n"},
    {"unknown controller",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 50, controller fuzzy\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:73: error: expected 'integral' or 'pi' after 'controller'\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 50, controller fuzzy\n"
     "                                                                        ^\n"},
    {"rtol without a number",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol x, atol 1e-6, max-steps 50\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:31: error: expected a number after 'rtol'\n"
     "  solver dormand-prince, rtol x, atol 1e-6, max-steps 50\n"
     "                              ^\n"},
    {"text after a statement",
     "model m\n"
     "input x[4] extra\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:12: error: expected ',' before another option of the vector, or the end of the statement\n"
     "input x[4] extra\n"
     "           ^\n"},
    {"missing comma between layer options",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2 tanh\n"
     "output y[2]\n",
     "bad.mnd:3:17: error: expected ',' before another layer option, or the end of the layer\n"
     "dense a: 4 -> 2 tanh\n"
     "                ^\n"},
    {"missing comma between solver options",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4 steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:14: error: expected ',' before another solver option, or the end of the solver line\n"
     "  solver rk4 steps 4\n"
     "             ^\n"},
    {"unknown statement",
     "model m\n"
     "input x[4]\n"
     "layer a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:1: error: expected a statement: weights, weights-as, ignore, learn, input, state, dense, residual, continuous, blend, gated, merge or output\n"
     "layer a: 4 -> 2\n"
     "^\n"},
    {"unknown statement in a block",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  dens a: 4 -> 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:4:3: error: expected a statement inside the block: dense, residual, augment, numbered, layout, weights-as, solver, trained-with or '}'\n"
     "  dens a: 4 -> 4\n"
     "  ^\n"},
    {"plus without t",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 + -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:4:16: error: expected 't'\n"
     "  dense f: 4 + -> 4\n"
     "               ^\n"},
    {"size overflows",
     "model m\n"
     "input x[99999999999]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:9: error: integer 99999999999 is too large (at most 2147483647)\n"
     "input x[99999999999]\n"
     "        ^\n"},
    {"real overflows",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1e999] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:27: error: number 1e999 is out of the range of a double\n"
     "continuous c: 4, t in [0, 1e999] {\n"
     "                          ^\n"},
    {"parameter on tanh",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2, tanh 0.5\n"
     "output y[2]\n",
     "bad.mnd:3:23: error: activation 'tanh' takes no parameter (only leaky-relu and elu do)\n"
     "dense a: 4 -> 2, tanh 0.5\n"
     "                      ^\n"},
    {"two activations",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2, tanh, relu\n"
     "output y[2]\n",
     "bad.mnd:3:24: error: layer 'a' has a second activation\n"
     "dense a: 4 -> 2, tanh, relu\n"
     "                       ^\n"},
    {"weight given twice",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2, weight \"p\", weight \"q\"\n"
     "output y[2]\n",
     "bad.mnd:3:37: error: 'weight' is given twice for layer 'a'\n"
     "dense a: 4 -> 2, weight \"p\", weight \"q\"\n"
     "                                    ^\n"},
    {"from and weight",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2, from \"enc\", weight \"q\"\n"
     "output y[2]\n",
     "bad.mnd:3:7: error: layer 'a' names its weight tensor twice ('from' and 'weight')\n"
     "dense a: 4 -> 2, from \"enc\", weight \"q\"\n"
     "      ^\n"},
    {"bias and no-bias",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2, bias \"b\", no-bias\n"
     "output y[2]\n",
     "bad.mnd:3:7: error: layer 'a' has both 'bias' and 'no-bias'\n"
     "dense a: 4 -> 2, bias \"b\", no-bias\n"
     "      ^\n"},
    {"empty weights path",
     "model m\n"
     "weights \"\"\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:9: error: empty string: a path or tensor name is needed here\n"
     "weights \"\"\n"
     "        ^\n"},
    {"second model statement",
     "model m\n"
     "model n\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:1: error: a second 'model' statement; this description already describes model 'm'\n"
     "model n\n"
     "^\n"},
    {"second input",
     "model m\n"
     "input x[4]\n"
     "input z[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:1: error: a second 'input' statement (the first is on line 2)\n"
     "input z[4]\n"
     "^\n"},
    {"input after a layer",
     "model m\n"
     "dense a: 4 -> 2\n"
     "input x[4]\n"
     "output y[2]\n",
     "bad.mnd:3:1: error: 'input' must come before the first layer or block\n"
     "input x[4]\n"
     "^\n"},
    {"weights after input",
     "model m\n"
     "input x[4]\n"
     "weights \"m.npz\"\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:1: error: 'weights' must come before 'input' and the layers\n"
     "weights \"m.npz\"\n"
     "^\n"},
    {"layer after output",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n"
     "dense b: 2 -> 2\n",
     "bad.mnd:5:1: error: this statement follows the 'output' statement of line 4; 'output' must be the last statement\n"
     "dense b: 2 -> 2\n"
     "^\n"},
    {"missing output",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n",
     "bad.mnd:3:16: error: missing 'output NAME[N]' statement at the end of the description\n"
     "dense a: 4 -> 2\n"
     "               ^\n"},
    {"missing input",
     "model m\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:12: error: missing 'input NAME[N]' statement (it comes after 'model' and 'weights')\n"
     "output y[2]\n"
     "           ^\n"},
    {"solver at top level",
     "model m\n"
     "input x[4]\n"
     "solver rk4, steps 4\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:1: error: 'solver' is allowed only inside a continuous block\n"
     "solver rk4, steps 4\n"
     "^\n"},
    {"solver in a residual",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  dense a: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:3: error: 'solver' is allowed only inside a continuous block, not in residual 'r'\n"
     "  solver rk4, steps 4\n"
     "  ^\n"},
    {"augment not first",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  augment 2\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:3: error: 'augment' must be the first statement of continuous 'c'\n"
     "  augment 2\n"
     "  ^\n"},
    {"two solver lines",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "  solver rk4, steps 8\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:6:3: error: continuous 'c' already has a solver line (line 5)\n"
     "  solver rk4, steps 8\n"
     "  ^\n"},
    {"layer after the solver line",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "  dense g: 4 -> 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:6:3: error: layer 'g' comes after the solver line of continuous 'c'; the field's layers come first\n"
     "  dense g: 4 -> 4\n"
     "  ^\n"},
    {"solver option twice",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4, steps 8\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:30: error: solver option 'steps' is given twice\n"
     "  solver rk4, steps 4, steps 8\n"
     "                             ^\n"},
    {"continuous inside a residual",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  continuous c: 4, t in [0, 1] {\n"
     "    dense f: 4 -> 4\n"
     "    solver rk4, steps 4\n"
     "  }\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:4:3: error: expected '}' to close residual 'r' (opened on line 3)\n"
     "  continuous c: 4, t in [0, 1] {\n"
     "  ^\n"},
    // Binding as training code names and lays out tensors: ignore, numbered, layout, transposed, time-first.
    {"ignore without a quoted pattern",
     "model m\n"
     "weights \"w.npz\"\n"
     "ignore mean\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:8: error: expected a quoted tensor name pattern after 'ignore' ('*' stands for any run of characters, '?' for one)\n"
     "ignore mean\n"
     "       ^\n"},
    {"ignore patterns without a comma",
     "model m\n"
     "weights \"w.npz\"\n"
     "ignore \"mean\" \"std\"\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:15: error: expected ',' before another pattern, or the end of the ignore statement\n"
     "ignore \"mean\" \"std\"\n"
     "              ^\n"},
    {"ignore without weights",
     "model m\n"
     "ignore \"mean\"\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:1: error: 'ignore' names tensors of the weights file: it comes after the 'weights' statement\n"
     "ignore \"mean\"\n"
     "^\n"},
    {"ignore after input",
     "model m\n"
     "weights \"w.npz\"\n"
     "input x[4]\n"
     "ignore \"mean\"\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:4:1: error: 'ignore' must come before 'input' and the layers\n"
     "ignore \"mean\"\n"
     "^\n"},
    {"second ignore statement",
     "model m\n"
     "weights \"w.npz\"\n"
     "ignore \"mean\"\n"
     "ignore \"std\"\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:4:1: error: a second 'ignore' statement (the first is on line 3); list every pattern in one\n"
     "ignore \"std\"\n"
     "^\n"},
    {"numbered at the top level",
     "model m\n"
     "input x[4]\n"
     "numbered \"net\"\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:1: error: 'numbered' is allowed only inside a residual or continuous block (it applies to the block's layers)\n"
     "numbered \"net\"\n"
     "^\n"},
    {"numbered without a quoted prefix",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  numbered net\n"
     "  dense a: 4 -> 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:4:12: error: expected a quoted module prefix after 'numbered' (\"net\" binds net.0, net.2, ...)\n"
     "  numbered net\n"
     "           ^\n"},
    {"numbered after a layer",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  dense a: 4 -> 4\n"
     "  numbered \"net\"\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:3: error: 'numbered' must come before the layers of residual 'r'\n"
     "  numbered \"net\"\n"
     "  ^\n"},
    {"numbered twice",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  numbered \"net\"\n"
     "  numbered \"body\"\n"
     "  dense a: 4 -> 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:3: error: residual 'r' already has a 'numbered' statement (line 4)\n"
     "  numbered \"body\"\n"
     "  ^\n"},
    {"augment after numbered",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  numbered \"net\"\n"
     "  augment 2\n"
     "  dense f: 6 -> 6\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[6]\n",
     "bad.mnd:5:3: error: 'augment' must be the first statement of continuous 'c'\n"
     "  augment 2\n"
     "  ^\n"},
    {"unknown layout",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  layout columns\n"
     "  dense a: 4 -> 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:4:10: error: expected a layout: 'transposed' (weights stored (in, out)) or 'time-first' (the time column first)\n"
     "  layout columns\n"
     "         ^\n"},
    {"layout given twice in one statement",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  layout transposed, transposed\n"
     "  dense a: 4 -> 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:4:22: error: 'transposed' is given twice in the layout statement\n"
     "  layout transposed, transposed\n"
     "                     ^\n"},
    {"second layout statement",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  layout transposed\n"
     "  layout time-first\n"
     "  dense a: 4 -> 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:3: error: residual 'r' already has a 'layout' statement (line 4)\n"
     "  layout time-first\n"
     "  ^\n"},
    {"model-wide layout after a layer",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "layout transposed\n"
     "output y[2]\n",
     "bad.mnd:4:1: error: a model-wide 'layout' must come before the 'state' statement and the first layer or block\n"
     "layout transposed\n"
     "^\n"},
    {"second model-wide layout",
     "model m\n"
     "layout transposed\n"
     "layout time-first\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:1: error: model 'm' already has a 'layout' statement (line 2)\n"
     "layout time-first\n"
     "^\n"},
    {"time-first on a layer without time",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2, time-first\n"
     "output y[2]\n",
     "bad.mnd:3:18: error: layer 'a' has no time column: 'time-first' applies to a layer with '+ t'\n"
     "dense a: 4 -> 2, time-first\n"
     "                 ^\n"},
    {"transposed twice on a layer",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2, transposed, tanh, transposed\n"
     "output y[2]\n",
     "bad.mnd:3:36: error: 'transposed' is given twice for layer 'a'\n"
     "dense a: 4 -> 2, transposed, tanh, transposed\n"
     "                                   ^\n"},
};

const std::vector<Row> kCheckRows = {
    {"first layer does not take the input width",
     "model m\n"
     "input x[6]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:7: error: layer 'a' takes 4 inputs, but input 'x' gives 6\n"
     "dense a: 4 -> 2\n"
     "      ^\n"},
    {"layer does not take the previous width",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 8, relu\n"
     "dense b: 6 -> 2\n"
     "output y[2]\n",
     "bad.mnd:4:7: error: layer 'b' takes 6 inputs, but layer 'a' gives 8\n"
     "dense b: 6 -> 2\n"
     "      ^\n"},
    {"residual body changes the width",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "  dense a: 4 -> 3\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:10: error: residual 'r' must map width 4 to width 4, but ends with width 3 (layer 'a')\n"
     "residual r: 4 {\n"
     "         ^\n"},
    {"residual width differs from incoming",
     "model m\n"
     "input x[4]\n"
     "residual r: 5 {\n"
     "  dense a: 5 -> 5\n"
     "}\n"
     "output y[5]\n",
     "bad.mnd:3:10: error: residual 'r' has width 5, but input 'x' gives 4\n"
     "residual r: 5 {\n"
     "         ^\n"},
    {"field does not map the augmented state",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  augment 2\n"
     "  dense f: 6 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[6]\n",
     "bad.mnd:3:12: error: the field of continuous 'c' must map width 6 (4 + augment 2) to width 6, but ends with width 4 (layer 'f')\n"
     "continuous c: 4, t in [0, 1] {\n"
     "           ^\n"},
    {"layer after an augmented block",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  augment 2\n"
     "  dense f: 6 -> 6\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "dense h: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:8:7: error: layer 'h' takes 4 inputs, but continuous 'c' gives 6\n"
     "dense h: 4 -> 2\n"
     "      ^\n"},
    {"output size differs",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[3]\n",
     "bad.mnd:4:8: error: output 'y' has size 3, but layer 'a' gives 2\n"
     "output y[3]\n"
     "       ^\n"},
    {"time input outside a continuous block",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 + t -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:7: error: layer 'a' uses '+ t', but time exists only inside a continuous block\n"
     "dense a: 4 + t -> 2\n"
     "      ^\n"},
    {"model name is a C++ keyword",
     "model float\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'float' cannot be used: it becomes the emitted C++ namespace, and 'float' is a "
     "C++ keyword or a name the emitted code uses\n"
     "model float\n"
     "      ^\n"},
    {"model name reserved by C++",
     "model _Pump\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name '_Pump' cannot be used: names beginning with '_' or containing '__' are reserved "
     "in C++\n"
     "model _Pump\n"
     "      ^\n"},
    {"model name is a macro of cmath",
     "model NAN\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'NAN' cannot be used: it becomes the emitted C++ namespace, and 'NAN' is a macro of the C library (<cmath>)\n"
     "model NAN\n"
     "      ^\n"},
    {"model name is a limit macro of cstdint",
     "model INT_LEAST16_MAX\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'INT_LEAST16_MAX' cannot be used: it becomes the emitted C++ namespace, and 'INT_LEAST16_MAX' is a macro of the C library (<cstdint>)\n"
     "model INT_LEAST16_MAX\n"
     "      ^\n"},
    {"model name is a constant macro of cstdint",
     "model UINTMAX_C\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'UINTMAX_C' cannot be used: it becomes the emitted C++ namespace, and 'UINTMAX_C' is a macro of the C library (<cstdint>)\n"
     "model UINTMAX_C\n"
     "      ^\n"},
    {"model name is a macro of cstddef",
     "model offsetof\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'offsetof' cannot be used: it becomes the emitted C++ namespace, and 'offsetof' is a macro of the C library (<cstddef>)\n"
     "model offsetof\n"
     "      ^\n"},
    {"model name is a type of cstdint",
     "model int32_t\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'int32_t' cannot be used: it becomes the emitted C++ namespace, and 'int32_t' is a type of the C library (<cstdint>)\n"
     "model int32_t\n"
     "      ^\n"},
    {"model name is a type of cstddef",
     "model max_align_t\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'max_align_t' cannot be used: it becomes the emitted C++ namespace, and 'max_align_t' is a type of the C library (<cstddef>)\n"
     "model max_align_t\n"
     "      ^\n"},
    {"model name is a classification function",
     "model isnan\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'isnan' cannot be used: it becomes the emitted C++ namespace, and 'isnan' is a function of the C library (<cmath>)\n"
     "model isnan\n"
     "      ^\n"},
    {"model name is a float variant of a math function",
     "model expm1f\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'expm1f' cannot be used: it becomes the emitted C++ namespace, and 'expm1f' is a function of the C library (<cmath>)\n"
     "model expm1f\n"
     "      ^\n"},
    {"model name is a function of cstdlib",
     "model exit\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'exit' cannot be used: it becomes the emitted C++ namespace, and 'exit' is a function of the C library (<cstdlib>)\n"
     "model exit\n"
     "      ^\n"},
    {"model name ends in _t",
     "model valve_t\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:1:7: error: model name 'valve_t' cannot be used: names ending in '_t' are reserved for types by POSIX\n"
     "model valve_t\n"
     "      ^\n"},
    {"max-steps beyond the 32-bit counters",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 2147483647\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': up to 12884901884 field evaluations per inference, more than the emitted 32-bit counters hold (4294967295)\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 2147483647\n"
     "         ^\n"},
    {"augment beyond the width limit",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  augment 2147483647\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:12: error: continuous 'c' has augment 2147483647; it must be at most 1048576\n"
     "continuous c: 4, t in [0, 1] {\n"
     "           ^\n"},
    {"state beyond the width limit",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  augment 1048573\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:12: error: the state of continuous 'c' has width 1048577 (4 + augment 1048573); widths must be at most 1048576\n"
     "continuous c: 4, t in [0, 1] {\n"
     "           ^\n"},
    {"interval beyond float32",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [1e300, 1.0000000000000002e300] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:23: error: continuous 'c' integrates over [1e300, 1.0000000000000002e300]: the start time 1e300 is beyond the largest float32 value 3.4028234663852886e38\n"
     "continuous c: 4, t in [1e300, 1.0000000000000002e300] {\n"
     "                      ^\n"},
    {"interval end beyond float32",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, -3.5e38] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:23: error: continuous 'c' integrates over [0, -3.5e38]: the end time -3.5e38 is beyond the largest float32 value 3.4028234663852886e38\n"
     "continuous c: 4, t in [0, -3.5e38] {\n"
     "                      ^\n"},
    {"interval empty in float32",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [1, 1.00000001] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:23: error: continuous 'c' integrates over [1, 1.00000001], which is empty in float32: both ends round to 1\n"
     "continuous c: 4, t in [1, 1.00000001] {\n"
     "                      ^\n"},
    {"interval length overflows float32",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [-3e38, 3e38] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:23: error: continuous 'c' integrates over [-3e38, 3e38], whose length t1 - t0 is not finite in float32\n"
     "continuous c: 4, t in [-3e38, 3e38] {\n"
     "                      ^\n"},
    {"interval length overflows float64",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [-1.7e308, 1.7e308] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:23: error: continuous 'c' integrates over [-1.7e308, 1.7e308], whose length t1 - t0 is not finite in float64\n"
     "continuous c: 4, t in [-1.7e308, 1.7e308] {\n"
     "                      ^\n"},
    {"model field evaluations beyond the 32-bit counters",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 715827882, first-step 0.1\n"
     "}\n"
     "continuous d: 4, t in [0, 1] {\n"
     "  dense g: 4 -> 4\n"
     "  solver euler, steps 3\n"
     "}\n"
     "output y[4]\n",
     // 1 + 6 x 715827882 = 4294967293 (Dormand-Prince: 7 stages, the last reused), + 3 Euler steps
     "bad.mnd:9:10: error: model 'm': its continuous blocks together need up to 4294967296 field evaluations per "
     "inference, more than the emitted 32-bit counters hold (4294967295); the sum passes the limit at continuous 'd'\n"
     "  solver euler, steps 3\n"
     "         ^\n"},
    {"input size beyond the width limit",
     "model m\n"
     "input x[2000000]\n"
     "dense a: 2000000 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:7: error: input 'x' has size 2000000; sizes must be at most 1048576\n"
     "input x[2000000]\n"
     "      ^\n"},
    {"layer output beyond the width limit",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 1048577\n"
     "dense b: 1048577 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:7: error: layer 'a' has output width 1048577; widths must be at most 1048576\n"
     "dense a: 4 -> 1048577\n"
     "      ^\n"},
    {"output size beyond the width limit",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 2\n"
     "output y[4194304]\n",
     "bad.mnd:4:8: error: output 'y' has size 4194304; sizes must be at most 1048576\n"
     "output y[4194304]\n"
     "       ^\n"},
    {"duplicate layer name",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 4\n"
     "dense a: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:4:7: error: duplicate name 'a' (first used on line 3)\n"
     "dense a: 4 -> 2\n"
     "      ^\n"},
    {"softmax before the last layer",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 4, softmax\n"
     "dense b: 4 -> 2\n"
     "output y[2]\n",
     "bad.mnd:3:7: error: softmax is allowed only on the model's last layer, not on layer 'a'\n"
     "dense a: 4 -> 4, softmax\n"
     "      ^\n"},
    {"empty interval",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [1, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:23: error: continuous 'c' integrates over the empty interval [1, 1]; t0 and t1 must differ\n"
     "continuous c: 4, t in [1, 1] {\n"
     "                      ^\n"},
    {"unknown solver method",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk5, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': unknown method 'rk5'; known methods: euler, midpoint, heun, rk4, rk38, bogacki-shampine, dormand-prince, tsitouras, cash-karp\n"
     "  solver rk5, steps 4\n"
     "         ^\n"},
    {"fixed step without steps",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': fixed-step method 'rk4' needs 'steps N'\n"
     "  solver rk4\n"
     "         ^\n"},
    {"zero steps",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver heun, steps 0\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': steps must be at least 1, got 0\n"
     "  solver heun, steps 0\n"
     "         ^\n"},
    {"fixed step with rtol",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver euler, steps 4, rtol 1e-3\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': fixed-step method 'euler' takes no 'rtol' option (it applies to adaptive methods)\n"
     "  solver euler, steps 4, rtol 1e-3\n"
     "         ^\n"},
    {"adaptive without rtol",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver bogacki-shampine, atol 1e-6, max-steps 40\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': adaptive method 'bogacki-shampine' needs 'rtol X'\n"
     "  solver bogacki-shampine, atol 1e-6, max-steps 40\n"
     "         ^\n"},
    {"adaptive without a step limit",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': adaptive method 'dormand-prince' needs 'max-steps N': without a step limit an inference has no time bound\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6\n"
     "         ^\n"},
    {"zero rtol",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 0, atol 1e-6, max-steps 40\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': rtol must be greater than 0, got 0\n"
     "  solver dormand-prince, rtol 0, atol 1e-6, max-steps 40\n"
     "         ^\n"},
    {"negative atol",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 1e-3, atol -1e-6, max-steps 40\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': atol must be greater than 0, got -1e-6\n"
     "  solver dormand-prince, rtol 1e-3, atol -1e-6, max-steps 40\n"
     "         ^\n"},
    {"zero step limit",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver tsitouras, rtol 1e-3, atol 1e-6, max-steps 0\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': max-steps must be at least 1, got 0\n"
     "  solver tsitouras, rtol 1e-3, atol 1e-6, max-steps 0\n"
     "         ^\n"},
    {"zero first step",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver cash-karp, rtol 1e-3, atol 1e-6, max-steps 40, first-step 0\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': first-step must be greater than 0, got 0\n"
     "  solver cash-karp, rtol 1e-3, atol 1e-6, max-steps 40, first-step 0\n"
     "         ^\n"},
    {"safety of one",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 40, safety 1\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': safety must lie strictly between 0 and 1, got 1\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 40, safety 1\n"
     "         ^\n"},
    {"zero min-factor",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 40, min-factor 0\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': min-factor must satisfy 0 < min-factor <= 1, got 0\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 40, min-factor 0\n"
     "         ^\n"},
    {"max-factor below one",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 40, max-factor 0.5\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': max-factor must be at least 1, got 0.5\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 40, max-factor 0.5\n"
     "         ^\n"},
    {"adaptive with steps",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, steps 8, rtol 1e-3, atol 1e-6, max-steps 40\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': adaptive method 'dormand-prince' takes no 'steps' option (it applies to fixed-step methods)\n"
     "  solver dormand-prince, steps 8, rtol 1e-3, atol 1e-6, max-steps 40\n"
     "         ^\n"},
    {"rtol below float32 resolution",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 1e-6, atol 1e-6, max-steps 40\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:5:10: error: solver line of continuous 'c': rtol 1e-6 is below what float32 arithmetic can deliver (100 x epsilon = 1.19e-5)\n"
     "  solver dormand-prince, rtol 1e-6, atol 1e-6, max-steps 40\n"
     "         ^\n"},
    {"no solver line",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:12: error: continuous 'c' has no solver line\n"
     "continuous c: 4, t in [0, 1] {\n"
     "           ^\n"},
    {"zero input size",
     "model m\n"
     "input x[0]\n"
     "dense a: 0 -> 2\n"
     "output y[2]\n",
     "bad.mnd:2:7: error: input 'x' has size 0; sizes must be at least 1\n"
     "input x[0]\n"
     "      ^\n"},
    {"zero output width",
     "model m\n"
     "input x[4]\n"
     "dense a: 4 -> 0\n"
     "output y[0]\n",
     "bad.mnd:3:7: error: layer 'a' has output width 0; widths must be at least 1\n"
     "dense a: 4 -> 0\n"
     "      ^\n"},
    {"unknown trained-with method",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver rk4, steps 4\n"
     "  trained-with rk-4, steps 4\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:6:16: error: trained-with line of continuous 'c': unknown method 'rk-4'; known methods: euler, midpoint, heun, rk4, rk38, bogacki-shampine, dormand-prince, tsitouras, cash-karp\n"
     "  trained-with rk-4, steps 4\n"
     "               ^\n"},
    {"trained-with without a step limit",
     "model m\n"
     "input x[4]\n"
     "continuous c: 4, t in [0, 1] {\n"
     "  dense f: 4 -> 4\n"
     "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 40\n"
     "  trained-with dormand-prince, rtol 1e-3, atol 1e-6\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:6:16: error: trained-with line of continuous 'c': adaptive method 'dormand-prince' needs 'max-steps N': without a step limit an inference has no time bound\n"
     "  trained-with dormand-prince, rtol 1e-3, atol 1e-6\n"
     "               ^\n"},
    {"empty residual",
     "model m\n"
     "input x[4]\n"
     "residual r: 4 {\n"
     "}\n"
     "output y[4]\n",
     "bad.mnd:3:10: error: residual 'r' has no layers\n"
     "residual r: 4 {\n"
     "         ^\n"},
    {"no layers",
     "model m\n"
     "input x[4]\n"
     "output y[4]\n",
     "bad.mnd:1:7: error: model 'm' has no layers or blocks\n"
     "model m\n"
     "      ^\n"},
};

class SyntaxError : public ::testing::TestWithParam<Row> {};
class CheckError : public ::testing::TestWithParam<Row> {};

TEST_P(SyntaxError, FirstErrorIsExact) {
    const Row& row = GetParam();
    Diagnostics diags = run(row.text);
    EXPECT_EQ(first_error(diags), row.first_error) << row.name;
}

TEST_P(CheckError, FirstErrorIsExact) {
    const Row& row = GetParam();
    // The description must parse: these are errors of meaning, not of syntax.
    Source src("bad.mnd", row.text);
    Diagnostics parse_diags;
    ASSERT_TRUE(parse_description(src, parse_diags).has_value()) << parse_diags.render();
    Diagnostics diags = run(row.text);
    EXPECT_EQ(first_error(diags), row.first_error) << row.name;
}

std::string row_name(const ::testing::TestParamInfo<Row>& info) {
    std::string n;
    for (const char* p = info.param.name; *p; ++p) n += std::isalnum(static_cast<unsigned char>(*p)) ? *p : '_';
    return n;
}

INSTANTIATE_TEST_SUITE_P(Descriptions, SyntaxError, ::testing::ValuesIn(kSyntaxRows), row_name);
INSTANTIATE_TEST_SUITE_P(Descriptions, CheckError, ::testing::ValuesIn(kCheckRows), row_name);

TEST(BadDescriptions, TableIsLargeEnough) {
    EXPECT_GE(kSyntaxRows.size() + kCheckRows.size(), 40u);
}

// Recovery: each broken statement is reported, and parsing resumes at the next statement.
TEST(SeveralErrors, SyntaxErrorsInSeparateStatements) {
    Diagnostics diags = run(
        "model m\n"
        "input x[4\n"
        "dense a 4 -> 8\n"
        "dense b: 8 -> 2, tanhh\n"
        "output y[2]\n");
    ASSERT_EQ(diags.error_count(), 3) << diags.render();
    EXPECT_EQ(diags.render(),
              "bad.mnd:3:1: error: expected ']'\n"
              "dense a 4 -> 8\n"
              "^\n"
              "bad.mnd:3:9: error: expected ':'\n"
              "dense a 4 -> 8\n"
              "        ^\n"
              "bad.mnd:4:18: error: expected a layer option: an activation (identity, relu, leaky-relu, tanh, sigmoid, "
              "softplus, silu, gelu, elu, softmax), 'weight', 'bias', 'from', 'no-bias', 'transposed', 'time-first' or 'weights-as'\n"
              "dense b: 8 -> 2, tanhh\n"
              "                 ^\n");
}

TEST(SeveralErrors, ErrorsInsideBlocksDoNotHideLaterOnes) {
    Diagnostics diags = run(
        "model m\n"
        "input x[4]\n"
        "continuous c: 4, t in [0, 1] {\n"
        "  dense f1: 4 + t -> 8 softplus\n"
        "  dense f2: 8 -> 4\n"
        "  solver rk4, stepz 4\n"
        "}\n"
        "residual r 4 {\n"
        "  dense g: 4 -> 4\n"
        "}\n"
        "output y[4\n");
    ASSERT_EQ(diags.error_count(), 4) << diags.render();
    const auto& all = diags.all();
    EXPECT_EQ(all[0].loc.line, 4);
    EXPECT_EQ(all[0].message, "expected ',' before another layer option, or the end of the layer");
    EXPECT_EQ(all[1].loc.line, 6);
    EXPECT_EQ(all[1].loc.col, 15);
    EXPECT_EQ(all[2].loc.line, 8);
    EXPECT_EQ(all[2].message, "expected ':'");
    EXPECT_EQ(all[3].loc.line, 11);
    EXPECT_EQ(all[3].message, "expected ']'");
}

TEST(SeveralErrors, EveryShapeProblemIsReported) {
    Diagnostics diags = run(
        "model m\n"
        "input x[6]\n"
        "dense a: 4 -> 8\n"
        "dense b: 6 -> 8, softmax\n"
        "residual r: 8 {\n"
        "  dense c: 8 -> 7\n"
        "}\n"
        "dense a: 8 -> 3\n"
        "output y[2]\n");
    EXPECT_EQ(diags.render(),
              "bad.mnd:3:7: error: layer 'a' takes 4 inputs, but input 'x' gives 6\n"
              "dense a: 4 -> 8\n"
              "      ^\n"
              "bad.mnd:4:7: error: layer 'b' takes 6 inputs, but layer 'a' gives 8\n"
              "dense b: 6 -> 8, softmax\n"
              "      ^\n"
              "bad.mnd:5:10: error: residual 'r' must map width 8 to width 8, but ends with width 7 (layer 'c')\n"
              "residual r: 8 {\n"
              "         ^\n"
              "bad.mnd:8:7: error: duplicate name 'a' (first used on line 3)\n"
              "dense a: 8 -> 3\n"
              "      ^\n"
              "bad.mnd:4:7: error: softmax is allowed only on the model's last layer, not on layer 'b'\n"
              "dense b: 6 -> 8, softmax\n"
              "      ^\n"
              "bad.mnd:9:8: error: output 'y' has size 2, but layer 'a' gives 3\n"
              "output y[2]\n"
              "       ^\n");
}

// A nesting depth limit, not a stack overflow.
TEST(Nesting, DeepBlocksGiveAnError) {
    std::string text = "model m\ninput x[2]\n";
    for (int i = 0; i < 40; ++i) text += "residual r" + std::to_string(i) + ": 2 {\n";
    text += "dense a: 2 -> 2\n";
    for (int i = 0; i < 40; ++i) text += "}\n";
    text += "output y[2]\n";
    Diagnostics diags = run(text);
    ASSERT_GE(diags.error_count(), 1);
    EXPECT_EQ(first_error(diags),
              "bad.mnd:35:10: error: blocks are nested more than 32 deep\n"
              "residual r32: 2 {\n"
              "         ^\n");
}

TEST(Nesting, DeepUnclosedInputDoesNotCrash) {
    std::string text = "model m\ninput x[2]\n" + std::string(100000, '{') + "\noutput y[2]\n";
    Diagnostics diags = run(text);
    EXPECT_EQ(diags.error_count(), 1) << diags.render();
    // Unclosed blocks nested past the limit: the limit and the first missing '}', nothing more.
    std::string blocks = "model m\ninput x[2]\n";
    for (int i = 0; i < 20000; ++i) blocks += "residual r: 2 {\n";
    blocks += "output y[2]\n";
    Diagnostics more = run(blocks);
    ASSERT_EQ(more.error_count(), 2) << more.render();
    EXPECT_EQ(more.all()[0].message, "blocks are nested more than 32 deep");
    EXPECT_EQ(more.all()[1].message, "expected '}' to close residual 'r' (opened on line 34)");
    EXPECT_EQ(more.all()[1].loc.line, 20003);
}

// Every prefix of a valid description either parses or reports an error; none crashes.
TEST(Truncation, EveryPrefixGivesAModelOrAnError) {
    const std::string full =
        "# pump\nmodel p\nweights \"p.npz\"\ninput v[3]\ndense a: 3 -> 4, leaky-relu 0.1, from \"enc\"\n"
        "continuous c: 4, t in [0, 1.5] {\n  augment 1\n  residual r: 5 {\n    dense f: 5 + t -> 5, elu\n  }\n"
        "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 30, controller pi\n  trained-with rk4, steps 4\n}\n"
        "dense h: 5 -> 2, softmax, no-bias\noutput o[2]\n";
    int parsed = 0;
    for (std::size_t n = 0; n <= full.size(); ++n) {
        Source src("cut.mnd", full.substr(0, n));
        Diagnostics diags;
        auto model = parse_description(src, diags);
        if (model) {
            ++parsed;
            check_model(*model, src, CheckOptions{}, diags);
        } else {
            EXPECT_GE(diags.error_count(), 1) << n;
        }
        for (const auto& d : diags.all()) EXPECT_GE(d.loc.line, 1) << n;
    }
    // Only cuts after the output statement (its ']' and the final newline) parse.
    EXPECT_EQ(parsed, 2);
}

}  // namespace
}  // namespace meander
