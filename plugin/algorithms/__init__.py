"""One Processing algorithm per module. The provider finds every ChannelHabitatAlgorithm
subclass with an ALG_ID in the modules of this package (modules starting with '_' are skipped)."""
