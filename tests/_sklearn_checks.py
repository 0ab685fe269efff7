"""scikit-learn's common checks that cannot apply to a transformer over a table of unit keys, with the reason."""

ARRAYS = ("sklearn's check feeds random numeric arrays; X must be a table of unit keys (contract 1), which is "
          "refused with UnitError; the same contract is tested above on real units tables")
EXPECTED_FAILURES = {name: ARRAYS for name in (
    "check_fit_score_takes_y", "check_estimators_overwrite_params", "check_dont_overwrite_parameters",
    "check_estimators_fit_returns_self", "check_readonly_memmap_input", "check_n_features_in_after_fitting",
    "check_positive_only_tag_during_fit", "check_estimators_dtypes", "check_complex_data", "check_dtype_object",
    "check_estimators_empty_data_messages", "check_pipeline_consistency", "check_estimators_nan_inf",
    "check_estimator_sparse_tag", "check_estimator_sparse_array", "check_estimator_sparse_matrix",
    "check_estimators_pickle", "check_f_contiguous_array_estimator", "check_transformer_data_not_an_array",
    "check_transformer_general", "check_transformer_preserve_dtypes", "check_methods_sample_order_invariance",
    "check_methods_subset_invariance", "check_fit2d_1sample", "check_fit2d_1feature", "check_dict_unchanged",
    "check_fit_idempotent", "check_fit_check_is_fitted", "check_n_features_in", "check_fit2d_predict1d",
)}
