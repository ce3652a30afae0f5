//! Training float classifiers (linfa) and the reference accuracies.
