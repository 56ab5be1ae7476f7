// Error messages of the grammar's must<> points (grammar/meander.hpp).
// The parser's control (compiler/parse.cpp) reports error_message<Rule> at
// the first character of the offending token; a must<> point without a
// message here fails to compile.
#pragma once

#include "meander.hpp"

namespace meander::grammar {

template< typename Rule >
inline constexpr const char* error_message = nullptr;

// Statements
template<> inline constexpr const char* error_message< model_first > = "expected 'model NAME' as the first statement";
template<> inline constexpr const char* error_message< top_statement > = "expected a statement: weights, weights-as, ignore, learn, input, state, dense, residual, continuous, blend, gated, merge or output";
template<> inline constexpr const char* error_message< body_statement > = "expected a statement inside the block: dense, residual, augment, numbered, layout, weights-as, solver, trained-with or '}'";
template<> inline constexpr const char* error_message< statement_end > = "expected the end of the statement";
template<> inline constexpr const char* error_message< learn_what > = "expected what learns after 'learn': biases, head, all, or layers NAME, NAME ...";
template<> inline constexpr const char* error_message< learn_layer > = "expected the name of a layer or block to learn";
template<> inline constexpr const char* error_message< learn_way > = "expected how the gradient goes back after 'by': steps or adjoint";
template<> inline constexpr const char* error_message< dense_end > = "expected ',' before another layer option, or the end of the layer";
template<> inline constexpr const char* error_message< ignore_end > = "expected ',' before another pattern, or the end of the ignore statement";
template<> inline constexpr const char* error_message< layout_end > = "expected ',' before another layout, or the end of the layout statement";
template<> inline constexpr const char* error_message< solver_end > = "expected ',' before another solver option, or the end of the solver line";

// Names
template<> inline constexpr const char* error_message< model_name > = "expected the model's name (a letter or '_', then letters, digits or '_')";
template<> inline constexpr const char* error_message< input_name > = "expected the input's name";
template<> inline constexpr const char* error_message< output_name > = "expected the output's name";
template<> inline constexpr const char* error_message< layer_name > = "expected the layer's name";
template<> inline constexpr const char* error_message< residual_name > = "expected the residual block's name";
template<> inline constexpr const char* error_message< continuous_name > = "expected the continuous block's name";
template<> inline constexpr const char* error_message< state_name > = "expected the state's name";
template<> inline constexpr const char* error_message< blend_name > = "expected the blend block's name";
template<> inline constexpr const char* error_message< kw_largest_gap > = "expected 'largest-gap' and the largest gap between two observations";
template<> inline constexpr const char* error_message< merge_plus > = "expected '+' and the observation width (a merge reads the state, then the observation)";
template<> inline constexpr const char* error_message< gated_option > = "expected a gated-layer option: 'from' and a quoted tensor name prefix, 'transposed' or 'time-first'";
template<> inline constexpr const char* error_message< vector_option > = "expected an option of the vector's values: 'names [...]', 'classes [...]' or 'standardised mean ... scale ...'";
template<> inline constexpr const char* error_message< vector_end > = "expected ',' before another option of the vector, or the end of the statement";
template<> inline constexpr const char* error_message< named_value > = "expected a value's name (a letter or '_', then letters, digits or '_')";
template<> inline constexpr const char* error_message< value_unit > = "expected the unit as a quoted string, as in 'in \"degC\"'";
template<> inline constexpr const char* error_message< class_name > = "expected a class name (a letter or '_', then letters, digits or '_')";
template<> inline constexpr const char* error_message< mean_part > = "expected 'mean' and a quoted tensor name or '[' and the values";
template<> inline constexpr const char* error_message< scale_part > = "expected 'scale' and a quoted tensor name or '[' and the values";
template<> inline constexpr const char* error_message< mean_source > = "expected a quoted tensor name or '[' and one mean per value";
template<> inline constexpr const char* error_message< scale_source > = "expected a quoted tensor name or '[' and one scale per value";
template<> inline constexpr const char* error_message< mean_value > = "expected a number (one mean per value)";
template<> inline constexpr const char* error_message< scale_value > = "expected a number (one scale per value)";

// Punctuation
template<> inline constexpr const char* error_message< colon > = "expected ':'";
template<> inline constexpr const char* error_message< comma > = "expected ','";
template<> inline constexpr const char* error_message< arrow > = "expected '->'";
template<> inline constexpr const char* error_message< open_bracket > = "expected '['";
template<> inline constexpr const char* error_message< close_bracket > = "expected ']'";
template<> inline constexpr const char* error_message< open_brace > = "expected '{'";
// Reported with the block's kind, name and line when a block is open (see unclosed_block below).
template<> inline constexpr const char* error_message< close_brace > = "expected '}'";
template<> inline constexpr const char* error_message< kw_t > = "expected 't'";
template<> inline constexpr const char* error_message< kw_in > = "expected 'in'";
template<> inline constexpr const char* error_message< interval > = "expected '[' and the time interval";
// Reported at the opening quote.
template<> inline constexpr const char* error_message< string_escape_char > = "unknown escape in a string: write \\\" for a quote, \\\\ for a backslash, \\n for a line break";
template<> inline constexpr const char* error_message< string_close > = "expected '\"' to end this string on the same line";

// Strings
template<> inline constexpr const char* error_message< weights_path > = "expected a quoted path after 'weights'";
template<> inline constexpr const char* error_message< weights_key > = "expected a quoted key path after 'under' (\"model/state_dict\")";
template<> inline constexpr const char* error_message< weight_tensor > = "expected a quoted tensor name after 'weight'";
template<> inline constexpr const char* error_message< bias_tensor > = "expected a quoted tensor name after 'bias'";
template<> inline constexpr const char* error_message< ignore_pattern > = "expected a quoted tensor name pattern after 'ignore' ('*' stands for any run of characters, '?' for one)";
template<> inline constexpr const char* error_message< numbered_prefix > = "expected a quoted module prefix after 'numbered' (\"net\" binds net.0, net.2, ...)";
template<> inline constexpr const char* error_message< from_prefix > = "expected a quoted tensor name prefix after 'from'";

// Numbers
template<> inline constexpr const char* error_message< input_size > = "expected the input size (an integer)";
template<> inline constexpr const char* error_message< output_size > = "expected the output size (an integer)";
template<> inline constexpr const char* error_message< in_width > = "expected the layer's input width (an integer)";
template<> inline constexpr const char* error_message< out_width > = "expected the layer's output width (an integer)";
template<> inline constexpr const char* error_message< block_width > = "expected the block's width (an integer)";
template<> inline constexpr const char* error_message< augment_size > = "expected the number of augmented dimensions (an integer)";
template<> inline constexpr const char* error_message< t0_value > = "expected the start time (a number)";
template<> inline constexpr const char* error_message< t1_value > = "expected the end time (a number)";
template<> inline constexpr const char* error_message< interval_end > = "expected the end time (a number, or 'gap' in a streaming model)";
template<> inline constexpr const char* error_message< state_size > = "expected the state size (an integer)";
template<> inline constexpr const char* error_message< gap_value > = "expected the largest gap (a number) after 'largest-gap'";
template<> inline constexpr const char* error_message< obs_width > = "expected the observation width (an integer) after '+'";
template<> inline constexpr const char* error_message< steps_per_unit_value > = "expected a number after 'steps-per-unit'";

// Layer options
template<> inline constexpr const char* error_message< dense_option > = "expected a layer option: an activation (identity, relu, leaky-relu, tanh, sigmoid, softplus, silu, gelu, elu, softmax), 'weight', 'bias', 'from', 'no-bias', 'transposed', 'time-first' or 'weights-as'";
template<> inline constexpr const char* error_message< storage_name > = "expected a weight storage: 'float', 'int8' or 'int16' (integers with one scale per output row)";
template<> inline constexpr const char* error_message< storage_line_name > = "expected a weight storage: 'float', 'int8' or 'int16' (integers with one scale per output row)";
template<> inline constexpr const char* error_message< layout_option > = "expected a layout: 'transposed' (weights stored (in, out)) or 'time-first' (the time column first)";

// Solver lines
template<> inline constexpr const char* error_message< solver_method > = "expected a solver method (such as rk4 or dormand-prince)";
template<> inline constexpr const char* error_message< solver_option > = "expected a solver option: steps, steps-per-unit, rtol, atol, max-steps, first-step, controller, safety, min-factor, max-factor, pi-alpha or pi-beta";
template<> inline constexpr const char* error_message< steps_value > = "expected the number of steps (an integer) after 'steps'";
template<> inline constexpr const char* error_message< max_steps_value > = "expected the step limit (an integer) after 'max-steps'";
template<> inline constexpr const char* error_message< rtol_value > = "expected a number after 'rtol'";
template<> inline constexpr const char* error_message< atol_value > = "expected a number after 'atol'";
template<> inline constexpr const char* error_message< first_step_value > = "expected a number after 'first-step'";
template<> inline constexpr const char* error_message< safety_value > = "expected a number after 'safety'";
template<> inline constexpr const char* error_message< min_factor_value > = "expected a number after 'min-factor'";
template<> inline constexpr const char* error_message< max_factor_value > = "expected a number after 'max-factor'";
template<> inline constexpr const char* error_message< pi_alpha_value > = "expected a number after 'pi-alpha'";
template<> inline constexpr const char* error_message< pi_beta_value > = "expected a number after 'pi-beta'";
template<> inline constexpr const char* error_message< controller_kind > = "expected 'integral' or 'pi' after 'controller'";

// The closing-brace message when a block is open: kind, name, line of the block's name.
inline constexpr const char* unclosed_block = "expected '}}' to close {} '{}' (opened on line {})";

}  // namespace meander::grammar
