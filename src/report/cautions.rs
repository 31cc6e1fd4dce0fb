//! The cautions every report carries (as in the README's Cautions paragraph), in one place so
//! that the text and JSON reports, and anything else that shows a model to a person, say the same thing.

/// What a reader of a model report must keep in mind, one sentence or two each.
pub const CAUTIONS: [&str; 5] = [
    "A model estimate is not a decision. These probabilities inform decisions about people's \
     credit, benefits and care; a person makes each decision and answers for it.",
    "Decisions must follow local law, fair-lending and anti-discrimination rules, and licensed \
     professional practice, whatever the model says.",
    "An out-of-range warning means the model is extrapolating: the observation lies outside the \
     data the model was fitted on, and its probability and effects there rest on the model's \
     form alone.",
    "Monitor outcomes before trusting a new version: compare its probabilities with what \
     actually happens, and with the version it replaces, before it informs decisions on its own.",
    "A marginal effect describes how the probability varies with a covariate in the fitted \
     model; it is not by itself evidence of what changing that covariate for a person would do.",
];
