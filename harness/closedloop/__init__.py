"""The closed loop: the compiled generated C against the plant, scenarios, figures of merit,
reports and the speed benchmark."""
