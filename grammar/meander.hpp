// The meander description language: the grammar, as PEGTL rules only.
// The actions that build a Model live in compiler/parse.cpp, the error
// messages of the must<> points in grammar/errors.hpp; LANGUAGE.md lists the
// same grammar in PEG form.
//
// Conventions: a statement rule starts at its first token and ends at its
// last one; the separator `sep` (blanks and comments) sits between tokens and
// after each statement. Names used by actions or error messages are distinct
// structs, so each position can carry its own action and message.
#pragma once

#include <tao/pegtl.hpp>

namespace meander::grammar {

using namespace tao::pegtl;

// ---- Lexical ----------------------------------------------------------------
struct comment : seq< one< '#' >, star< not_one< '\n' > > > {};
struct blank : one< ' ', '\t', '\r', '\n' > {};
struct sep : star< sor< blank, comment > > {};
struct word_char : ranges< 'a', 'z', 'A', 'Z', '0', '9', '_', '_', '-' > {};
struct word_end : not_at< word_char > {};
struct identifier : seq< ranges< 'a', 'z', 'A', 'Z', '_' >, star< ranges< 'a', 'z', 'A', 'Z', '0', '9', '_' > > > {};
struct integer : seq< plus< digit >, not_at< sor< one< '.', '_' >, alpha > > > {};
struct fraction : seq< one< '.' >, star< digit > > {};
struct exponent : seq< one< 'e', 'E' >, opt< one< '+', '-' > >, plus< digit > > {};
struct mantissa : sor< seq< plus< digit >, opt< fraction > >, seq< one< '.' >, plus< digit > > > {};
struct real : seq< opt< one< '+', '-' > >, mantissa, opt< exponent >, not_at< sor< one< '.', '_' >, alpha > > > {};
struct string_open : one< '"' > {};
struct string_close : one< '"' > {};
struct string_escape_char : one< '"', '\\', 'n' > {};
struct string_escape : seq< one< '\\' >, must< string_escape_char > > {};
struct string_chars : star< sor< string_escape, not_one< '"', '\\', '\n', '\r' > > > {};
struct colon : one< ':' > {};
struct comma : one< ',' > {};
struct arrow : string< '-', '>' > {};
struct open_bracket : one< '[' > {};
struct close_bracket : one< ']' > {};
struct open_brace : one< '{' > {};
struct close_brace : one< '}' > {};

// ---- Keywords (a keyword ends where a word character cannot follow) ----------
struct kw_model : seq< TAO_PEGTL_STRING( "model" ), word_end > {};
struct kw_weights : seq< TAO_PEGTL_STRING( "weights" ), word_end > {};
struct kw_under : seq< TAO_PEGTL_STRING( "under" ), word_end > {};
struct kw_input : seq< TAO_PEGTL_STRING( "input" ), word_end > {};
struct kw_output : seq< TAO_PEGTL_STRING( "output" ), word_end > {};
struct kw_dense : seq< TAO_PEGTL_STRING( "dense" ), word_end > {};
struct kw_residual : seq< TAO_PEGTL_STRING( "residual" ), word_end > {};
struct kw_continuous : seq< TAO_PEGTL_STRING( "continuous" ), word_end > {};
struct kw_augment : seq< TAO_PEGTL_STRING( "augment" ), word_end > {};
struct kw_solver : seq< TAO_PEGTL_STRING( "solver" ), word_end > {};
struct kw_trained_with : seq< TAO_PEGTL_STRING( "trained-with" ), word_end > {};
struct kw_t : seq< one< 't' >, word_end > {};
struct kw_in : seq< TAO_PEGTL_STRING( "in" ), word_end > {};
struct kw_weight : seq< TAO_PEGTL_STRING( "weight" ), word_end > {};
struct kw_bias : seq< TAO_PEGTL_STRING( "bias" ), word_end > {};
struct kw_from : seq< TAO_PEGTL_STRING( "from" ), word_end > {};
struct kw_no_bias : seq< TAO_PEGTL_STRING( "no-bias" ), word_end > {};
struct kw_numbered : seq< TAO_PEGTL_STRING( "numbered" ), word_end > {};
struct kw_layout : seq< TAO_PEGTL_STRING( "layout" ), word_end > {};
struct kw_ignore : seq< TAO_PEGTL_STRING( "ignore" ), word_end > {};
struct kw_transposed : seq< TAO_PEGTL_STRING( "transposed" ), word_end > {};
struct kw_time_first : seq< TAO_PEGTL_STRING( "time-first" ), word_end > {};
struct kw_identity : seq< TAO_PEGTL_STRING( "identity" ), word_end > {};
struct kw_relu : seq< TAO_PEGTL_STRING( "relu" ), word_end > {};
struct kw_leaky_relu : seq< TAO_PEGTL_STRING( "leaky-relu" ), word_end > {};
struct kw_tanh : seq< TAO_PEGTL_STRING( "tanh" ), word_end > {};
struct kw_sigmoid : seq< TAO_PEGTL_STRING( "sigmoid" ), word_end > {};
struct kw_softplus : seq< TAO_PEGTL_STRING( "softplus" ), word_end > {};
struct kw_silu : seq< TAO_PEGTL_STRING( "silu" ), word_end > {};
struct kw_gelu : seq< TAO_PEGTL_STRING( "gelu" ), word_end > {};
struct kw_elu : seq< TAO_PEGTL_STRING( "elu" ), word_end > {};
struct kw_softmax : seq< TAO_PEGTL_STRING( "softmax" ), word_end > {};
struct kw_steps : seq< TAO_PEGTL_STRING( "steps" ), word_end > {};
struct kw_rtol : seq< TAO_PEGTL_STRING( "rtol" ), word_end > {};
struct kw_atol : seq< TAO_PEGTL_STRING( "atol" ), word_end > {};
struct kw_max_steps : seq< TAO_PEGTL_STRING( "max-steps" ), word_end > {};
struct kw_first_step : seq< TAO_PEGTL_STRING( "first-step" ), word_end > {};
struct kw_controller : seq< TAO_PEGTL_STRING( "controller" ), word_end > {};
struct kw_safety : seq< TAO_PEGTL_STRING( "safety" ), word_end > {};
struct kw_min_factor : seq< TAO_PEGTL_STRING( "min-factor" ), word_end > {};
struct kw_max_factor : seq< TAO_PEGTL_STRING( "max-factor" ), word_end > {};
struct kw_pi_alpha : seq< TAO_PEGTL_STRING( "pi-alpha" ), word_end > {};
struct kw_pi_beta : seq< TAO_PEGTL_STRING( "pi-beta" ), word_end > {};
struct kw_integral : seq< TAO_PEGTL_STRING( "integral" ), word_end > {};
struct kw_pi : seq< TAO_PEGTL_STRING( "pi" ), word_end > {};
// Weight storage
struct kw_weights_as : seq< TAO_PEGTL_STRING( "weights-as" ), word_end > {};
struct kw_float : seq< TAO_PEGTL_STRING( "float" ), word_end > {};
struct kw_int8 : seq< TAO_PEGTL_STRING( "int8" ), word_end > {};
struct kw_int16 : seq< TAO_PEGTL_STRING( "int16" ), word_end > {};
// Streaming models
struct kw_state : seq< TAO_PEGTL_STRING( "state" ), word_end > {};
struct kw_largest_gap : seq< TAO_PEGTL_STRING( "largest-gap" ), word_end > {};
struct kw_gap : seq< TAO_PEGTL_STRING( "gap" ), word_end > {};
struct kw_steps_per_unit : seq< TAO_PEGTL_STRING( "steps-per-unit" ), word_end > {};
struct kw_gated : seq< TAO_PEGTL_STRING( "gated" ), word_end > {};
struct kw_merge : seq< TAO_PEGTL_STRING( "merge" ), word_end > {};
struct kw_blend : seq< TAO_PEGTL_STRING( "blend" ), word_end > {};
// The values of the input and output vectors
struct kw_names : seq< TAO_PEGTL_STRING( "names" ), word_end > {};
struct kw_classes : seq< TAO_PEGTL_STRING( "classes" ), word_end > {};
struct kw_standardised : seq< TAO_PEGTL_STRING( "standardised" ), word_end > {};
struct kw_mean : seq< TAO_PEGTL_STRING( "mean" ), word_end > {};
struct kw_scale : seq< TAO_PEGTL_STRING( "scale" ), word_end > {};
// Learning on the device
struct kw_learn : seq< TAO_PEGTL_STRING( "learn" ), word_end > {};
struct kw_by : seq< TAO_PEGTL_STRING( "by" ), word_end > {};
struct kw_layers : seq< TAO_PEGTL_STRING( "layers" ), word_end > {};

// Words that begin a statement; skipping after an error stops before them.
struct statement_keyword : sor< kw_model, kw_weights, kw_weights_as, kw_ignore, kw_learn, kw_input, kw_output, kw_dense, kw_residual, kw_continuous, kw_augment, kw_numbered, kw_layout, kw_solver, kw_trained_with, kw_state, kw_gated, kw_merge, kw_blend > {};
// Statements that cannot appear inside a block: meeting one there means a '}' is missing.
struct top_only_keyword : sor< kw_model, kw_weights, kw_ignore, kw_learn, kw_input, kw_output, kw_continuous, kw_state, kw_gated, kw_merge, kw_blend > {};
// A statement ends at the end of its line, or where the next statement (or a '}') begins;
// an unknown word on a later line is then reported as an unknown statement.
struct statement_boundary : sor< eof, close_brace, statement_keyword > {};
struct line_rest : seq< star< one< ' ', '\t', '\r' > >, opt< comment >, sor< one< '\n' >, eof > > {};
struct statement_end : at< sor< line_rest, seq< sep, statement_boundary > > > {};
struct dense_end : at< sor< line_rest, seq< sep, statement_boundary > > > {};
struct solver_end : at< sor< line_rest, seq< sep, statement_boundary > > > {};
struct ignore_end : at< sor< line_rest, seq< sep, statement_boundary > > > {};
struct layout_end : at< sor< line_rest, seq< sep, statement_boundary > > > {};

// ---- the values of the input and output vectors: names, units, classes, standardisation ----
struct value_name : identifier {};
struct value_unit_text : string_chars {};
struct value_unit : seq< string_open, value_unit_text, must< string_close > > {};
struct named_value : seq< value_name, opt< sep, kw_in, sep, must< value_unit > > > {};
struct names_list : seq< must< open_bracket >, sep, must< named_value >, star< sep, comma, sep, must< named_value > >, sep, must< close_bracket > > {};
struct names_option : seq< kw_names, sep, names_list > {};
struct class_name : identifier {};
struct classes_list : seq< must< open_bracket >, sep, must< class_name >, star< sep, comma, sep, must< class_name > >, sep, must< close_bracket > > {};
struct classes_option : seq< kw_classes, sep, classes_list > {};
struct mean_tensor_text : string_chars {};
struct mean_tensor : seq< string_open, mean_tensor_text, must< string_close > > {};
struct mean_open : open_bracket {};
struct mean_value : real {};
struct mean_values : seq< mean_open, sep, must< mean_value >, star< sep, comma, sep, must< mean_value > >, sep, must< close_bracket > > {};
struct mean_source : sor< mean_tensor, mean_values > {};
struct scale_tensor_text : string_chars {};
struct scale_tensor : seq< string_open, scale_tensor_text, must< string_close > > {};
struct scale_open : open_bracket {};
struct scale_value : real {};
struct scale_values : seq< scale_open, sep, must< scale_value >, star< sep, comma, sep, must< scale_value > >, sep, must< close_bracket > > {};
struct scale_source : sor< scale_tensor, scale_values > {};
struct mean_part : seq< kw_mean, sep, must< mean_source > > {};
struct scale_part : seq< kw_scale, sep, must< scale_source > > {};
struct standardised_option : seq< kw_standardised, sep, must< mean_part >, sep, must< scale_part > > {};
struct vector_option : sor< names_option, classes_option, standardised_option > {};
struct vector_end : at< sor< line_rest, seq< sep, statement_boundary > > > {};

// ---- model, weights, input, output -------------------------------------------
struct model_first : at< kw_model > {};
struct model_name : identifier {};
struct model_line : seq< kw_model, sep, must< model_name >, must< statement_end > > {};
struct weights_path_text : string_chars {};
struct weights_path : seq< string_open, weights_path_text, must< string_close > > {};
struct weights_key_text : string_chars {};
struct weights_key : seq< string_open, weights_key_text, must< string_close > > {};
struct weights_under : seq< kw_under, sep, must< weights_key > > {};
struct weights_line : seq< kw_weights, sep, must< weights_path >, opt< sep, weights_under >, must< statement_end > > {};
struct ignore_pattern_text : string_chars {};
struct ignore_pattern : seq< string_open, ignore_pattern_text, must< string_close > > {};
struct ignore_line : seq< kw_ignore, sep, must< ignore_pattern >, star< sep, comma, sep, must< ignore_pattern > >, must< ignore_end > > {};
struct input_name : identifier {};
struct input_size : integer {};
struct input_line : seq< kw_input, sep, must< input_name >, sep, must< open_bracket >, sep, must< input_size >, sep, must< close_bracket >, star< sep, comma, sep, must< vector_option > >, must< vector_end > > {};
struct output_name : identifier {};
struct output_size : integer {};
struct output_line : seq< kw_output, sep, must< output_name >, sep, must< open_bracket >, sep, must< output_size >, sep, must< close_bracket >, star< sep, comma, sep, must< vector_option > >, must< vector_end > > {};

// ---- dense layers ---------------------------------------------------------------
struct layer_name : identifier {};
struct in_width : integer {};
struct out_width : integer {};
struct time_input : seq< one< '+' >, sep, must< kw_t > > {};
struct activation_name : sor< kw_identity, kw_relu, kw_leaky_relu, kw_tanh, kw_sigmoid, kw_softplus, kw_silu, kw_gelu, kw_elu, kw_softmax > {};
struct activation_param : real {};
struct activation_option : seq< activation_name, opt< sep, activation_param > > {};
struct weight_tensor_text : string_chars {};
struct weight_tensor : seq< string_open, weight_tensor_text, must< string_close > > {};
struct weight_option : seq< kw_weight, sep, must< weight_tensor > > {};
struct bias_tensor_text : string_chars {};
struct bias_tensor : seq< string_open, bias_tensor_text, must< string_close > > {};
struct bias_option : seq< kw_bias, sep, must< bias_tensor > > {};
struct from_prefix_text : string_chars {};
struct from_prefix : seq< string_open, from_prefix_text, must< string_close > > {};
struct from_option : seq< kw_from, sep, must< from_prefix > > {};
struct no_bias_option : kw_no_bias {};
struct transposed_option : kw_transposed {};
struct time_first_option : kw_time_first {};
struct storage_name : sor< kw_float, kw_int8, kw_int16 > {};
struct storage_option : seq< kw_weights_as, sep, must< storage_name > > {};
struct dense_option : sor< activation_option, weight_option, bias_option, from_option, no_bias_option, transposed_option, time_first_option, storage_option > {};
struct dense_line : seq< kw_dense, sep, must< layer_name >, sep, must< colon >, sep, must< in_width >, sep, opt< time_input, sep >, must< arrow >, sep, must< out_width >, star< sep, comma, sep, must< dense_option > >, must< dense_end > > {};

// ---- solver lines ---------------------------------------------------------------
struct solver_method : seq< alpha, star< word_char > > {};
struct steps_value : integer {};
struct rtol_value : real {};
struct atol_value : real {};
struct max_steps_value : integer {};
struct first_step_value : real {};
struct controller_kind : sor< kw_integral, kw_pi > {};
struct safety_value : real {};
struct min_factor_value : real {};
struct max_factor_value : real {};
struct pi_alpha_value : real {};
struct pi_beta_value : real {};
struct steps_option : seq< kw_steps, sep, must< steps_value > > {};
struct rtol_option : seq< kw_rtol, sep, must< rtol_value > > {};
struct atol_option : seq< kw_atol, sep, must< atol_value > > {};
struct max_steps_option : seq< kw_max_steps, sep, must< max_steps_value > > {};
struct first_step_option : seq< kw_first_step, sep, must< first_step_value > > {};
struct controller_option : seq< kw_controller, sep, must< controller_kind > > {};
struct safety_option : seq< kw_safety, sep, must< safety_value > > {};
struct min_factor_option : seq< kw_min_factor, sep, must< min_factor_value > > {};
struct max_factor_option : seq< kw_max_factor, sep, must< max_factor_value > > {};
struct pi_alpha_option : seq< kw_pi_alpha, sep, must< pi_alpha_value > > {};
struct pi_beta_option : seq< kw_pi_beta, sep, must< pi_beta_value > > {};
struct steps_per_unit_value : real {};
struct steps_per_unit_option : seq< kw_steps_per_unit, sep, must< steps_per_unit_value > > {};
struct solver_option : sor< steps_option, steps_per_unit_option, rtol_option, atol_option, max_steps_option, first_step_option, controller_option, safety_option, min_factor_option, max_factor_option, pi_alpha_option, pi_beta_option > {};
struct solver_options : seq< sep, must< solver_method >, star< sep, comma, sep, must< solver_option > >, must< solver_end > > {};
struct solver_line : seq< kw_solver, solver_options > {};
struct trained_line : seq< kw_trained_with, solver_options > {};
struct augment_size : integer {};
struct augment_line : seq< kw_augment, sep, must< augment_size >, must< statement_end > > {};
// How a block's layers name and lay out their tensors.
struct numbered_prefix_text : string_chars {};
struct numbered_prefix : seq< string_open, numbered_prefix_text, must< string_close > > {};
struct numbered_line : seq< kw_numbered, sep, must< numbered_prefix >, must< statement_end > > {};
struct layout_transposed : kw_transposed {};
struct layout_time_first : kw_time_first {};
struct layout_option : sor< layout_transposed, layout_time_first > {};
struct layout_line : seq< kw_layout, sep, must< layout_option >, star< sep, comma, sep, must< layout_option > >, must< layout_end > > {};
// How the layers (of the model, or of a block) store their weights.
struct storage_line_name : storage_name {};
struct storage_line : seq< kw_weights_as, sep, must< storage_line_name >, must< statement_end > > {};

// ---- error recovery: skip to the next statement keyword, over braced groups ----
struct skip_string : seq< one< '"' >, star< sor< seq< one< '\\' >, not_one< '\n' > >, not_one< '"', '\n' > > >, opt< one< '"' > > > {};
struct skip_token : sor< plus< blank >, comment, skip_string, plus< word_char >, not_one< '{', '}' > > {};
struct skip_group : seq< open_brace, star< not_at< top_only_keyword >, sor< skip_group, skip_token, open_brace > >, opt< close_brace > > {};
struct skip_unit : sor< skip_group, skip_token, open_brace > {};
struct top_skip : seq< sor< skip_unit, close_brace >, star< not_at< statement_keyword >, sor< skip_unit, close_brace > > > {};
struct body_skip : seq< skip_unit, star< not_at< sor< statement_keyword, close_brace > >, skip_unit > > {};

// ---- blocks ------------------------------------------------------------------------
struct residual_block;
struct body_statement : sor< dense_line, residual_block, augment_line, numbered_line, layout_line, storage_line, solver_line, trained_line > {};
struct body_attempt : must< body_statement > {};
struct body_item : seq< not_at< sor< close_brace, top_only_keyword, eof > >, sor< body_attempt, body_skip >, sep > {};
struct block_width : integer {};
struct residual_name : identifier {};
struct residual_block : seq< kw_residual, sep, must< residual_name >, sep, must< colon >, sep, must< block_width >, sep, must< open_brace >, sep, star< body_item >, must< close_brace > > {};
struct continuous_name : identifier {};
struct t0_value : real {};
struct t1_value : real {};
struct gap_end : kw_gap {};
struct interval_end : sor< t1_value, gap_end > {};
struct interval : seq< open_bracket, sep, must< t0_value >, sep, must< comma >, sep, must< interval_end >, sep, must< close_bracket > > {};
struct continuous_block : seq< kw_continuous, sep, must< continuous_name >, sep, must< colon >, sep, must< block_width >, sep, must< comma >, sep, must< kw_t >, sep, must< kw_in >, sep, must< interval >, sep, must< open_brace >, sep, star< body_item >, must< close_brace > > {};

// ---- streaming models: state, evolution over a run-time gap, update, readout ---------
struct state_name : identifier {};
struct state_size : integer {};
struct gap_value : real {};
struct state_line : seq< kw_state, sep, must< state_name >, sep, must< open_bracket >, sep, must< state_size >, sep, must< close_bracket >, sep, must< comma >, sep, must< kw_largest_gap >, sep, must< gap_value >, must< statement_end > > {};
struct gated_option : sor< from_option, transposed_option, time_first_option > {};
struct gated_line : seq< kw_gated, sep, must< layer_name >, sep, must< colon >, sep, must< in_width >, sep, must< arrow >, sep, must< out_width >, star< sep, comma, sep, must< gated_option > >, must< dense_end > > {};
struct merge_plus : one< '+' > {};
struct obs_width : integer {};
struct merge_line : seq< kw_merge, sep, must< layer_name >, sep, must< colon >, sep, must< in_width >, sep, must< merge_plus >, sep, must< obs_width >, sep, must< arrow >, sep, must< out_width >, star< sep, comma, sep, must< dense_option > >, must< dense_end > > {};
struct blend_name : identifier {};
struct blend_block : seq< kw_blend, sep, must< blend_name >, sep, must< colon >, sep, must< block_width >, sep, must< open_brace >, sep, star< body_item >, must< close_brace > > {};

// ---- learning on the device -------------------------------------------------------
struct learn_biases : seq< TAO_PEGTL_STRING( "biases" ), word_end > {};
struct learn_head : seq< TAO_PEGTL_STRING( "head" ), word_end > {};
struct learn_all : seq< TAO_PEGTL_STRING( "all" ), word_end > {};
struct learn_layer : identifier {};
struct learn_layers : seq< kw_layers, sep, must< learn_layer >, star< sep, comma, sep, must< learn_layer > > > {};
struct learn_what : sor< learn_biases, learn_head, learn_all, learn_layers > {};
struct learn_steps : seq< TAO_PEGTL_STRING( "steps" ), word_end > {};
struct learn_adjoint : seq< TAO_PEGTL_STRING( "adjoint" ), word_end > {};
struct learn_way : sor< learn_steps, learn_adjoint > {};
struct learn_by : seq< kw_by, sep, must< learn_way > > {};
struct learn_line : seq< kw_learn, sep, must< learn_what >, opt< sep, learn_by >, must< statement_end > > {};

// ---- the description ------------------------------------------------------------
struct top_statement : sor< model_line, weights_line, storage_line, ignore_line, learn_line, input_line, output_line, dense_line, residual_block, continuous_block, augment_line, numbered_line, layout_line, solver_line, trained_line, state_line, gated_line, merge_line, blend_block > {};
struct top_attempt : must< top_statement > {};
struct top_item : seq< not_at< eof >, sor< top_attempt, top_skip >, sep > {};
struct description : seq< sep, must< model_first >, star< top_item >, eof > {};

}  // namespace meander::grammar
