mod io_inputs;
