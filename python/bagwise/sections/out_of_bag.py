"""The out-of-bag section: the error on the training rows from the members that did not
see them (`out_of_bag`)."""

from __future__ import annotations

from ._base import Section, number


class OutOfBagSection(Section):
    key = "out_of_bag"
    title = "Out of bag"
    result_type = "OutOfBag"
    doc = "`out_of_bag` on the training rows; None without counts and training predictions."

    def compute(self, inputs, done):
        from .._validation import renamed_arguments
        from ..out_of_bag import out_of_bag

        if inputs.counts is None:
            return None
        if inputs.train_members is not None:
            try:
                return out_of_bag(inputs.train_members, inputs.counts, inputs.y_train,
                                  n_jobs=inputs.n_jobs)
            except (ValueError, TypeError) as error:
                names = {"members": "train_members", "y": "y_train"}
                raise renamed_arguments(error, names) from None
        if (inputs.members_are_training is not False
                and inputs.counts.shape[1] == inputs.members.shape[1]):
            return out_of_bag(inputs.members, inputs.counts, inputs.y, n_jobs=inputs.n_jobs)
        return None

    def summary(self, result, diagnosis):
        return {"loss": result.loss, "ensemble_loss": number(result.ensemble_loss),
                "n_points": result.n_points,
                "n_without_out_of_bag": result.n_without_out_of_bag}

    def readings(self, result, diagnosis):
        covered = result.n_points - result.n_without_out_of_bag
        return [f"out-of-bag {result.loss.replace('_', ' ')} {result.ensemble_loss:.4g} on the "
                f"{covered:,} training rows, an estimate of the error on new data"]


section = OutOfBagSection()
