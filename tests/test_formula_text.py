"""The formula builders: exact text for every kind of cell (what a reviewer sees when clicking a cell)."""

from __future__ import annotations

import pytest

from sheetnet.book import formula_text
from sheetnet.net.activations import Activation

SIG = Activation("sigmoid")
STEEP = Activation("sigmoid", 2.5, 0.5)

CASES = [
    (formula_text.number(0.1), "0.1"),
    (formula_text.number(2.0), "2"),
    (formula_text.number(-0.3), "(-0.3)"),
    (formula_text.number(1e-12), "1E-12"),
    (formula_text.number(0.1 + 0.2), "0.30000000000000004"),  # repr: round-trips exactly
    (formula_text.text_literal('say "hi"'), '"say ""hi"""'),
    (formula_text.label_literal("2"), "2"),
    (formula_text.label_literal("=cmd"), '"=cmd"'),
    (formula_text.scaled_input("B4", "Parameters!$B$5", "Parameters!$B$6"), "=(B4-Parameters!$B$5)/Parameters!$B$6"),
    (formula_text.weighted_sum("Parameters!$B$12:$E$12", "B5:E5", "Parameters!$F$12"),
     "=SUMPRODUCT(Parameters!$B$12:$E$12,B5:E5)+Parameters!$F$12"),
    (formula_text.activation(SIG, "K7"), "=IF(K7>=0,1/(1+EXP(-K7)),EXP(K7)/(1+EXP(K7)))"),
    (formula_text.activation(STEEP, "K7"), "=IF((2.5*(K7-0.5))>=0,1/(1+EXP(-(2.5*(K7-0.5)))),"
                                 "EXP((2.5*(K7-0.5)))/(1+EXP((2.5*(K7-0.5)))))"),
    (formula_text.activation(Activation("tanh"), "K7"), "=TANH(K7)"),
    (formula_text.activation(Activation("relu"), "K7"), "=MAX(K7,0)"),
    (formula_text.activation(Activation("identity"), "K7"), "=K7"),
    (formula_text.activation(Activation("step", midpoint=0.5), "K7"), "=IF(K7>=0.5,1,0)"),
    (formula_text.activation(Activation("softmax"), "K7", "M7", "N7"), "=EXP(K7-M7)/N7"),
    (formula_text.softmax_max("J7:L7"), "=MAX(J7:L7)"),
    (formula_text.softmax_sum("J7:L7", "M7"), "=SUMPRODUCT(EXP(J7:L7-M7))"),
    (formula_text.output_delta("cross-entropy", SIG, "K7", "L7", "E7"), "=L7-E7"),
    (formula_text.output_delta("cross-entropy", STEEP, "K7", "L7", "E7"), "=2.5*(L7-E7)"),
    (formula_text.output_delta("squared", SIG, "K7", "L7", "E7"), "=L7*(1-L7)*(L7-E7)"),
    (formula_text.output_delta("squared", Activation("identity"), "K7", "L7", "E7"), "=L7-E7"),
    (formula_text.output_delta("squared", Activation("softmax"), "K7", "L7", "E7", "L7:N7", "E7:G7"),
     "=L7*((L7-E7)-SUMPRODUCT(L7:N7-E7:G7,L7:N7))"),
    (formula_text.output_delta("cross-entropy", Activation("identity"), "K7", "L7", "E7"),
     "=(-E7/MAX(L7,probability_clip)*IF(L7>probability_clip,1,0)+(1-E7)/MAX(1-L7,probability_clip)"
     "*IF(1-L7>probability_clip,1,0))"),
    (formula_text.hidden_delta(SIG, "F7", "H7", [("Q6", "M7"), ("R6", "N7")]), "=H7*(1-H7)*(Q6*M7+R6*N7)"),
    (formula_text.hidden_delta(Activation("tanh"), "F7", "H7", [("Q6", "M7")]), "=(1-H7^2)*(Q6*M7)"),
    (formula_text.hidden_delta(Activation("relu"), "F7", "H7", [("Q6", "M7")]), "=IF(F7>0,1,0)*(Q6*M7)"),
    (formula_text.loss("squared", SIG, ["L7"], ["E7"], "L7", "E7"), "=SUMXMY2(E7,L7)/2"),
    (formula_text.loss("cross-entropy", SIG, ["L7"], ["E7"], "L7", "E7"),
     "=-(E7*LN(MAX(L7,probability_clip))+(1-E7)*LN(MAX(1-L7,probability_clip)))"),
    (formula_text.loss("cross-entropy", Activation("softmax"), ["L7", "M7"], ["E7", "F7"], "L7:M7", "E7:F7"),
     "=-(E7*LN(MAX(L7,probability_clip))+F7*LN(MAX(M7,probability_clip)))"),
    (formula_text.correct("binary", ["L7"], ["E7"], "L7", "E7"), "=IF((L7>=target_cut)=(E7>=target_cut),1,0)"),
    (formula_text.correct("multiclass", [], [], "L7:N7", "E7:G7"),
     "=IF(MATCH(MAX(L7:N7),L7:N7,0)=MATCH(MAX(E7:G7),E7:G7,0),1,0)"),
    (formula_text.encode_label("D12", 2), "=IF(D12=INDEX(class_labels,2),1,0)"),
    (formula_text.predicted_binary("Q12", "threshold"),
     "=IF(Q12>=threshold,INDEX(class_labels,2),INDEX(class_labels,1))"),
    (formula_text.predicted_multiclass("Q12:S12", "class_labels"),
     "=INDEX(class_labels,MATCH(MAX(Q12:S12),Q12:S12,0))"),
    (formula_text.gradient("M7*D7", "Q6", "l2_penalty"), "=M7*D7+l2_penalty*Q6"),
    (formula_text.gradient("AVERAGE(AA5:AA8)"), "=AVERAGE(AA5:AA8)"),
    (formula_text.update("Q6", "AB7", "learning_rate"), "=Q6-learning_rate*AB7"),
    (formula_text.velocity("AC6", "AB7", "learning_rate", "momentum"), "=momentum*AC6-learning_rate*AB7"),
    (formula_text.velocity("", "AB7", "learning_rate", "momentum"), "=-learning_rate*AB7"),
    (formula_text.update_with_velocity("Q6", "AC7"), "=Q6+AC7"),
    (formula_text.count_pairs("$D$12:$D$99", '"=yes"', "$V$12:$V$99", '"=no"'),
     '=COUNTIFS($D$12:$D$99,"=yes",$V$12:$V$99,"=no")'),
    (formula_text.rmse("$Q$9:$Q$20", "$D$9:$D$20"), "=SQRT(SUMXMY2($Q$9:$Q$20,$D$9:$D$20)/COUNT($D$9:$D$20))"),
]


@pytest.mark.parametrize(("built", "expected"), CASES)
def test_formula_text_is_exact(built, expected):
    assert built == expected


def test_no_builder_uses_a_function_outside_the_shared_vocabulary():
    import re

    vocabulary = {"SUMPRODUCT", "SUMXMY2", "AVERAGE", "AVERAGEIFS", "COUNT", "COUNTIFS", "EXP", "LN", "TANH",
                  "MAX", "IF", "INDEX", "MATCH", "SQRT", "ABS"}
    used = {name for text, _ in CASES for name in re.findall(r"([A-Z][A-Z0-9.]*)\(", text)}
    assert used <= vocabulary, used - vocabulary


def test_every_loss_has_its_numpy_function_its_formula_text_and_its_note():
    """The loss registries are one vocabulary: a loss added on one side only would write a workbook
    the trainer cannot reproduce (or fail with a KeyError on the first case)."""
    from sheetnet.book.cells.notes import LOSS_NOTES
    from sheetnet.net.activations import LOSSES, OUTPUT_DELTAS, SAMPLE_LOSSES

    assert set(LOSSES) == set(SAMPLE_LOSSES) == set(OUTPUT_DELTAS) == set(formula_text.LOSS_TEXT) == \
        set(formula_text.OUTPUT_DELTA_TEXT) == {loss for loss, _ in LOSS_NOTES}
