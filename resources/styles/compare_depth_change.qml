<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>
<!-- Channel Habitat, compareregimes: depth change (alternative minus base), m: own diverging palette, ochre = shallower, violet = deeper; lightness symmetric about a near-white zero. compareregimes rescales the ramp to the data. -->
<qgis hasScaleBasedVisibilityFlag="0" styleCategories="AllStyleCategories" minScale="1e+08" version="3.22.16-Białowieża" maxScale="0">
  <flags>
    <Identifiable>1</Identifiable>
    <Removable>1</Removable>
    <Searchable>1</Searchable>
    <Private>0</Private>
  </flags>
  <temporal fetchMode="0" mode="0" enabled="0">
    <fixedRange>
      <start></start>
      <end></end>
    </fixedRange>
  </temporal>
  <customproperties>
    <Option type="Map">
      <Option name="identify/format" value="Value" type="QString"/>
    </Option>
  </customproperties>
  <pipe-data-defined-properties>
    <Option type="Map">
      <Option name="name" value="" type="QString"/>
      <Option name="properties"/>
      <Option name="type" value="collection" type="QString"/>
    </Option>
  </pipe-data-defined-properties>
  <pipe>
    <provider>
      <resampling zoomedInResamplingMethod="nearestNeighbour" zoomedOutResamplingMethod="nearestNeighbour" enabled="false" maxOversampling="2"/>
    </provider>
    <rasterrenderer band="1" nodataColor="" opacity="1" alphaBand="-1" type="singlebandpseudocolor" classificationMin="-2" classificationMax="2">
      <minMaxOrigin>
        <limits>None</limits>
        <extent>WholeRaster</extent>
        <statAccuracy>Estimated</statAccuracy>
        <cumulativeCutLower>0.02</cumulativeCutLower>
        <cumulativeCutUpper>0.98</cumulativeCutUpper>
        <stdDevFactor>2</stdDevFactor>
      </minMaxOrigin>
      <rastershader>
        <colorrampshader clip="0" labelPrecision="6" colorRampType="INTERPOLATED" classificationMode="1" maximumValue="2" minimumValue="-2">
          <item alpha="255" label="-2 m or shallower" value="-2" color="#5e4a0b"/>
          <item alpha="255" label="-1.5 m" value="-1.5" color="#8c7020"/>
          <item alpha="255" label="-1 m" value="-1" color="#bfa154"/>
          <item alpha="255" label="-0.5 m" value="-0.5" color="#e4d3a3"/>
          <item alpha="255" label="0 m (no change)" value="0" color="#f3f1ee"/>
          <item alpha="255" label="+0.5 m" value="0.5" color="#cfc6e3"/>
          <item alpha="255" label="+1 m" value="1" color="#a091c8"/>
          <item alpha="255" label="+1.5 m" value="1.5" color="#6e5aa6"/>
          <item alpha="255" label="+2 m or deeper" value="2" color="#40307a"/>
          <rampLegendSettings suffix="" minimumLabel="" useContinuousLegend="1" maximumLabel="" prefix="" direction="0" orientation="2">
            <numericFormat id="basic">
              <Option type="Map">
                <Option name="decimal_separator" value="" type="QChar"/>
                <Option name="decimals" value="6" type="int"/>
                <Option name="rounding_type" value="0" type="int"/>
                <Option name="show_plus" value="false" type="bool"/>
                <Option name="show_thousand_separator" value="true" type="bool"/>
                <Option name="show_trailing_zeros" value="false" type="bool"/>
                <Option name="thousand_separator" value="" type="QChar"/>
              </Option>
            </numericFormat>
          </rampLegendSettings>
        </colorrampshader>
      </rastershader>
    </rasterrenderer>
    <brightnesscontrast brightness="0" gamma="1" contrast="0"/>
    <huesaturation colorizeOn="0" colorizeRed="255" grayscaleMode="0" colorizeStrength="100" saturation="0" colorizeGreen="128" invertColors="0" colorizeBlue="128"/>
    <rasterresampler maxOversampling="2"/>
    <resamplingStage>resamplingFilter</resamplingStage>
  </pipe>
  <blendMode>0</blendMode>
</qgis>
